"""Pipeline: Sample -> Estimate. The only place that composes the stages.

validate -> RobotModel (Pinocchio) -> MomentumObserver (bias and friction removed) ->
ContactMonitor -> WrenchMap -> Direction and AlongKinematics -> EnvironmentFilter -> Health.

The ROS node and the replay command both feed :class:`Sample` records into :meth:`Pipeline.process`
and turn the returned :class:`Estimate` into messages or file rows; for the same samples and
settings they get the same numbers. Memory is bounded: no history grows with run length.
"""
from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from .environment import EnvironmentFilter
from .health import ALL_CONVERGED, Health
from .model import RobotModel
from .observer import (BiasEstimator, ContactMonitor, FrictionModel, KalmanMomentumObserver,
                       MomentumObserver)
from .samples import RejectCounts, Sample, SampleRejected, SampleValidator
from .settings import Settings, per_joint
from .wrench import AlongKinematics, Direction, WrenchMap

_LEARN_INTERVAL = 0.01  # s: longest interval of quiet samples between noise-level updates
_KINEMATICS_WARMUP = 10  # samples used to learn the nominal sample interval before building AlongKinematics


@dataclass(slots=True)
class Estimate:
    """Everything the pipeline knows after one sample. SI units; world frame = URDF root.

    force (3,) N and torque (3,) N·m: what the robot applies to the environment at the contact
    frame (torque zero in force mode). direction (3,): unit u. force_along N,
    position_along m (from contact onset), velocity_along m/s, acceleration_along m/s^2 (at
    ``kinematics_lag`` s before ``time``). parameters (4,) [kg, N·s/m, N/m, N] and their
    standard deviations; per-parameter excited/converged flags; converged: all four converged.
    external_torque (nv,) N·m, bias (nv,) N·m in model joint order.
    """

    time: float
    force: np.ndarray
    torque: np.ndarray
    direction: np.ndarray
    force_along: float
    position_along: float
    velocity_along: float
    acceleration_along: float
    parameters: np.ndarray
    parameter_std: np.ndarray
    excited: np.ndarray
    parameter_converged: np.ndarray
    converged: bool
    in_contact: bool
    phase: str
    level: int
    state: str
    message: str
    nis: float
    nis_average: float
    nis_bounds: tuple[float, float]
    measurement_std: float
    external_torque: np.ndarray
    bias: np.ndarray
    bias_age: float
    contact_level: float
    jacobian_condition: float
    observer_restarts: int
    rejected: int
    rate_hz: float
    kinematics_lag: float
    event: str
    stamp_from_receive: bool


class _QuietPower:
    """Sum of the squared residual (nv,) N·m^2 over the quiet (free-motion) samples of one
    noise-learning interval: the noise level is learned from its mean, which is what the
    per-sample exponential average would have seen, once per interval."""

    __slots__ = ("dt", "count", "square")

    def __init__(self, nv: int):
        self.square = np.zeros(nv)
        self.clear()

    def clear(self) -> None:
        self.dt = 0.0
        self.count = 0
        self.square[:] = 0.0

    def add(self, dt: float, residual: np.ndarray) -> float:
        """One quiet sample, dt s after the previous one; returns the interval so far, s."""
        self.square += residual * residual
        self.count += 1
        self.dt += dt
        return self.dt


class Pipeline:
    """The estimator. ``Pipeline(settings, urdf_text)``; then :meth:`process` per sample.

    Raises ModelError (bad URDF, unknown contact frame) or SettingsError (per-joint lists that do
    not fit the model) at construction.
    """

    def __init__(self, settings: Settings, urdf: str):
        self.settings = settings
        self.model = RobotModel(urdf, settings["contact_frame"], settings["gravity"])
        self.validator = SampleValidator()
        self.rejects = RejectCounts()
        self._configure(settings)
        self.filter = EnvironmentFilter(settings)
        self.reset()

    # --- configuration ---------------------------------------------------------------------
    def _configure(self, s: Settings) -> None:
        joints = self.model.joint_names
        gain = np.array(per_joint(s, "observer.gain", joints))
        kalman = s["observer.form"] == "kalman"
        old_obs = getattr(self, "observer", None)
        if old_obs is None or isinstance(old_obs, KalmanMomentumObserver) != kalman:
            self.observer = (KalmanMomentumObserver(gain, s["observer.velocity_noise"],
                                                    s["observer.effort_noise"],
                                                    s["observer.max_gap"])
                             if kalman else MomentumObserver(gain, s["observer.max_gap"]))
        else:
            self.observer.gain, self.observer.max_gap = gain, s["observer.max_gap"]
            if kalman:
                self.observer.velocity_noise = s["observer.velocity_noise"]
                self.observer.effort_noise = s["observer.effort_noise"]
        self.friction = FrictionModel(per_joint(s, "friction.viscous", joints),
                                      per_joint(s, "friction.coulomb", joints),
                                      s["friction.smoothing_velocity"],
                                      s["effort_side"] == "motor")
        bias = BiasEstimator(per_joint(s, "bias.initial", joints), s["bias.time_constant"],
                             s["bias.max_rate"], s["bias.limit"], s["bias.learn"])
        old_bias = getattr(self, "bias", None)
        if old_bias is not None:  # keep what was learned
            bias.value, bias.last_learned = old_bias.value, old_bias.last_learned
        self.bias = bias
        contact = ContactMonitor(self.model.nv, s["contact.enter_level"], s["contact.exit_level"],
                                 s["contact.hold_time"], s["contact.noise_floor"],
                                 s["contact.noise_time_constant"], s["contact.release_time"])
        old_contact = getattr(self, "contact", None)
        if old_contact is not None:
            contact.set_noise_var(old_contact.noise_var)
            contact.in_contact = old_contact.in_contact
        self.contact = contact
        self.wrench_map = WrenchMap(s["wrench.mode"] == "wrench", s["wrench.damping"])
        old_dir = getattr(self, "direction", None)
        self.direction = Direction(s["direction.mode"], s["direction.vector"],
                                   s["direction.window"], s["direction.hysteresis"],
                                   s["direction.min_travel"])
        if old_dir is not None and old_dir.mode == self.direction.mode == "estimated":
            self.direction.u = old_dir.u
        # lag of the force behind tau_ext that the regressor must match: first order 1/K_O;
        # the Kalman form has none for slowly varying forces (None: no matching filter)
        self._gain_mean = None if kalman else float(np.mean(gain))
        # values read on every sample, looked up once here
        self._noise_tc = s["contact.noise_time_constant"]
        # the noise level is learned from the mean square over intervals of quiet samples (see
        # _QuietPower): its time constant is seconds, so one update per 10 ms learns the same as
        # one per sample, and the wrench's joint weights change only then
        self._learn_interval = min(_LEARN_INTERVAL, self._noise_tc / 20.0)
        self._forget_after = s["contact.forget_after"]
        self._health = Health(s["wrench.condition_limit"], s["health.min_rate"],
                              s["health.stale_after"])
        self._prior = (np.array(s["filter.initial_mean"]), np.array(s["filter.initial_std"]),
                       s["filter.measurement_std"])
        self._no_flags = np.zeros(4, bool)   # shared by Estimates: read-only
        self._no_flags.setflags(write=False)

    def apply_settings(self, settings: Settings) -> None:
        """Apply changed settings while running; learned state (bias, noise, estimates) is kept.

        Settings marked read-only in the registry (contact frame, gravity, URDF source, joint
        order) need a new Pipeline; the node refuses to change them at runtime.
        """
        changed_kin = any(settings[k] != self.settings[k]
                          for k in ("kinematics.window", "kinematics.polyorder"))
        self._configure(settings)
        self.filter.update_settings(settings)
        self.settings = settings
        if changed_kin:
            self.kinematics = None
            self._intervals.clear()

    # --- commands --------------------------------------------------------------------------
    def reset(self) -> None:
        """Forget everything learned at run time: observer, bias (back to the file's), contact,
        direction, object estimates. The startup bias-learning phase runs again."""
        self.validator.reset()
        self.observer.reset()
        self.bias.reset()
        self.contact.reset()
        self.direction.reset()
        self.filter.reset("reset")
        self.kinematics: AlongKinematics | None = None
        self._intervals: deque[float] = deque(maxlen=_KINEMATICS_WARMUP)
        self._t_prev: float | None = None
        self._t_start: float | None = None
        self._point_prev: list[float] | None = None   # contact point, m (world)
        self._contact_end: float = -math.inf   # time the last contact ended
        self._ever_contact = False
        self._quiet_position = 0.0
        self._dt_avg = 0.0
        self._quiet = _QuietPower(self.model.nv)
        self._reject_times: deque[float] = deque(maxlen=1000)
        self._rejected_before = self.rejects.total
        self._last_reject_total = self.rejects.total

    def calibrate_bias(self) -> tuple[bool, str]:
        """Start a bias-learning phase of ``bias.startup`` s now (the robot must move freely).

        Returns (accepted, message); refused while in contact, since the contact force would be
        learned as bias.
        """
        if self.contact.in_contact:
            return False, ("refused: the robot is in contact; move it clear of the object and "
                           "call again")
        if self._t_prev is None:
            return False, "refused: no joint states received yet"
        self._t_start = self._t_prev
        self._startup = max(self.settings["bias.startup"], 0.5)
        return True, f"learning torque bias for {self._startup:.1f} s: keep the robot clear of contact"

    # --- one sample ---------------------------------------------------------------------
    def process(self, sample: Sample) -> Estimate | None:
        """One sample in, one Estimate out; None when the sample is rejected (and counted)."""
        try:
            self.validator.check(sample)
            q, v, effort = self.model.joint_map(sample.names).apply(sample)
        except SampleRejected as exc:
            self._reject(sample.time, exc)
            return None
        t = sample.time
        if self._t_start is None:
            self._t_start = t
            self._startup = self.settings["bias.startup"]
        t_prev = self._t_prev
        dt = 0.0 if t_prev is None else t - t_prev

        mass, coriolis_t_v, gravity, jacobian, position, rotation = self.model.dynamics(q, v)
        friction = self.friction
        beta = (effort - friction.torque(v) if friction.enabled else effort) + coriolis_t_v
        beta -= gravity
        raw, restarted = self.observer.step(t, mass.dot(v), beta, mass)
        bias = self.bias
        residual = raw + bias.value

        contact = self.contact
        elapsed = t - self._t_start
        event = "observer_restarted" if restarted else ""
        if elapsed < self._startup:
            phase = "learning_bias"
            # the noise only in the second half (the bias has settled), 4x faster than when free
            bias.update(t, dt, raw)
            if elapsed > 0.5 * self._startup:
                if self._quiet.add(dt, raw + bias.value) >= self._learn_interval:
                    self._learn_noise(4.0 * self._noise_tc / max(self._startup, 1e-3))
            contact_level = 0.0
        else:
            in_contact, contact_level, contact_event = contact.step(t, residual)
            if contact_event:
                event = contact_event
            if in_contact:
                phase = "contact"
            else:
                phase = "free"
                # learn only from quiet free motion: a residual above the exit level may be a
                # contact building up, and must not be learned as bias or noise
                # nor right after a contact ended (it may resume: a held object's force
                # passing through zero)
                if (not contact.pending and contact_level < contact.exit_level
                        and t - self._contact_end > self._forget_after):
                    bias.update(t, dt, raw)
                    residual = raw + bias.value
                    if self._quiet.add(dt, residual) >= self._learn_interval:
                        self._learn_noise(1.0)
                elif self._quiet.count:
                    # quiet no more (a contact may be building up): learn the samples gathered
                    # so far at once, as a per-sample average would have, before judging more
                    self._learn_noise(1.0)

        force, torque, condition = self.wrench_map.solve(jacobian, residual, contact.weights)
        f0, f1, f2 = force.tolist()
        # NaN/inf anywhere (an overflowing sum of huge finite values counts as non-finite too)
        if not math.isfinite(f0 + f1 + f2 + (torque.dot(torque) if torque is not
                                                self.wrench_map.no_torque else 0.0)):
            self.observer.reset()
            self._reject(t, SampleRejected("non_finite_output",
                                           "the wrench came out non-finite; observer restarted"))
            return None

        point_velocity = jacobian[:3].dot(v)
        u = self.direction.update(dt, rotation, point_velocity)
        # the three projections on u in plain floats (three-element numpy products cost more)
        u0, u1, u2 = u.tolist()
        force_along = u0 * f0 + u1 * f1 + u2 * f2
        p0, p1, p2 = point = position.tolist()
        point_prev = self._point_prev
        dx = 0.0 if point_prev is None else (u0 * (p0 - point_prev[0]) + u1 * (p1 - point_prev[1])
                                             + u2 * (p2 - point_prev[2]))
        self._point_prev = point
        v0, v1, v2 = point_velocity.tolist()
        velocity_along = u0 * v0 + u1 * v1 + u2 * v2

        kin = self.kinematics if self.kinematics is not None else self._kinematics(dt)
        step = self.filter.last
        if kin is not None:
            if event == "contact_begin":
                if not self._ever_contact or t - self._contact_end > self._forget_after:
                    # a new contact: x from where the residual last was quiet (the contact
                    # began there, before the monitor could tell); estimates uncertain again
                    kin.start_contact(self._quiet_position)
                    if self._ever_contact:
                        self.filter.inflate("contact regained")
                else:
                    event = "contact_resumed"
                self._ever_contact = True
            kin.push(t, dx, velocity_along, force_along)
            if phase != "contact":
                if contact_level < contact.exit_level:
                    self._quiet_position = kin.position
            else:
                row = kin.aligned_row(dt)
                if row is not None:
                    try:
                        step = self.filter.update(row[2], row[0], row[1])
                    except SampleRejected as exc:
                        self._reject(t, exc)
                        return None
                    if step.change:
                        event = "change: " + step.change
            position_along, acceleration_along, lag = kin.position, kin.acceleration(), kin.lag
        else:
            position_along = acceleration_along = lag = 0.0
        if event == "contact_end":
            self._contact_end = t

        self._t_prev = t
        if dt > 0:
            self._dt_avg = dt if self._dt_avg == 0 else self._dt_avg + 0.01 * (dt - self._dt_avg)
        rate = 1.0 / self._dt_avg if self._dt_avg > 0 else 0.0
        reject_times = self._reject_times
        while reject_times and reject_times[0] < t - 1.0:
            reject_times.popleft()

        if step is None:
            theta, std, meas_std = self._prior
            excited = converged = self._no_flags
            nis = nis_avg = 0.0
            bounds, samples, pattern = (0.0, math.inf), 0, 0
        else:
            theta, std = step.theta, step.std
            excited, converged = step.excited, step.converged
            nis, nis_avg, bounds = step.nis, step.nis_average, step.nis_bounds
            meas_std, samples, pattern = math.sqrt(step.measurement_var), step.samples, step.pattern
        if phase != "contact":
            converged = self._no_flags
            pattern &= 0b1111
        stamp_from_receive = sample.stamp_from_receive
        level, state, message = self._health.judge(
            phase, self._startup - elapsed if elapsed < self._startup else 0.0,
            t - self._contact_end if self._ever_contact else math.inf, pattern, nis_avg,
            bounds[0], bounds[1], samples, condition, len(reject_times), rate,
            stamp_from_receive)
        return Estimate(
            time=t, force=force, torque=torque, direction=u.copy(), force_along=force_along,
            position_along=position_along, velocity_along=velocity_along,
            acceleration_along=acceleration_along, parameters=theta, parameter_std=std,
            excited=excited, parameter_converged=converged,
            converged=pattern & ALL_CONVERGED == ALL_CONVERGED, in_contact=phase == "contact",
            phase=phase, level=level, state=state, message=message, nis=nis,
            nis_average=nis_avg, nis_bounds=bounds, measurement_std=meas_std,
            external_torque=residual, bias=bias.value.copy(), bias_age=bias.age(t),
            contact_level=contact_level, jacobian_condition=condition,
            observer_restarts=self.observer.restarts, rejected=self.rejects.total, rate_hz=rate,
            kinematics_lag=lag, event=event, stamp_from_receive=stamp_from_receive)

    # --- helpers ---------------------------------------------------------------------------
    def _learn_noise(self, speed: float) -> None:
        """The residual's noise level from the quiet samples gathered since the last call
        (learned ``speed`` times faster than their duration says)."""
        q = self._quiet
        self.contact.learn_power(q.dt * speed, q.square / q.count)
        q.clear()

    def _reject(self, t: float, exc: SampleRejected) -> None:
        self.rejects.add(exc)
        self._reject_times.append(t)

    def _kinematics(self, dt: float) -> AlongKinematics | None:
        """Build AlongKinematics once the nominal interval is known (None until then)."""
        if dt > 0:
            self._intervals.append(dt)
        if len(self._intervals) < _KINEMATICS_WARMUP:
            return None
        s = self.settings
        self.kinematics = AlongKinematics(s["kinematics.window"], s["kinematics.polyorder"],
                                          float(np.median(self._intervals)), self._gain_mean)
        return self.kinematics
