"""Pipeline: Sample -> Estimate. The only place that composes the stages.

validate -> RobotModel (Pinocchio) -> MomentumObserver (bias and friction removed) ->
ContactMonitor -> WrenchMap -> Direction and AlongKinematics -> EnvironmentFilter -> Health.

The ROS node and the replay command both feed :class:`Sample` records into :meth:`Pipeline.process`
and turn the returned :class:`Estimate` into messages or file rows; for the same samples and
settings they get the same numbers. Memory is bounded: no history grows with run length.

Per sample, :meth:`Pipeline.process` validates the sample, maps it onto the model's joints, makes
the Pinocchio calls, and then runs every stage's arithmetic in one compiled call
(:func:`~interaction_estimator.core.pipeline_step.pipeline_step`) on the stages' state, which lives in
the Pipeline's arrays (the stage objects hold views into them, so their methods see the same
numbers); the output row becomes the :class:`Estimate` and the health verdict.
"""
from __future__ import annotations

import math
from collections import deque
from dataclasses import dataclass

import numpy as np

from . import pipeline_step as ps
from .environment import (EO_F, EO_H, EO_T, FILTER_CONFIG_SIZE,
                          FILTER_OUTPUT_SIZE, FILTER_STATE_SIZE, EnvironmentFilter,
                          change_text)
from .health import ALL_CONVERGED, PHASES, STATES, Health
from .model import RobotModel
from .observer import (BIAS_SIZE, CONTACT_ROWS, CONTACT_SIZE, OBSERVER_ROWS, OBSERVER_SIZE,
                       BiasEstimator, ContactMonitor, FrictionModel, KalmanMomentumObserver,
                       MomentumObserver)
from .samples import RejectCounts, Sample, SampleBlock, SampleRejected, SampleValidator
from .settings import Settings, per_joint
from .wrench import DIRECTION_SIZE, KINEMATICS_SIZE, AlongKinematics, Direction, WrenchMap

_LEARN_INTERVAL = 0.01  # s: longest interval of quiet samples between noise-level updates
_KINEMATICS_WARMUP = 10  # samples used to learn the nominal sample interval before building AlongKinematics
_STATE_WORDS = np.array(STATES, dtype=object)
_NO_TIMES = np.zeros(0)
_FLAG_ARRAYS = tuple(np.array([bool(bits >> i & 1) for i in range(4)]) for bits in range(16))
for _a in _FLAG_ARRAYS:   # shared by the Estimates that carry them: read-only
    _a.setflags(write=False)


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


class EstimateBlock:
    """The estimates of the accepted samples of one :class:`~.samples.SampleBlock`, as columns
    (m rows): the fields of :class:`Estimate` that a table of estimates holds, each an array
    with one row per estimate (``nis_bounds`` as the pair (lower (m,), upper (m,)), ``state``
    a list of words). Messages, events and the other per-sample texts are not made (see
    :meth:`Pipeline.process_block`)."""

    __slots__ = ("time", "out", "level", "state")

    def __init__(self, time: np.ndarray, out: np.ndarray, level: np.ndarray, state: list[str]):
        self.time, self.out, self.level, self.state = time, out, level, state

    def __len__(self) -> int:
        return len(self.time)

    force = property(lambda self: self.out[:, 0:3])
    direction = property(lambda self: self.out[:, 6:9])
    force_along = property(lambda self: self.out[:, ps.O_FORCE_ALONG])
    position_along = property(lambda self: self.out[:, ps.O_POSITION_ALONG])
    velocity_along = property(lambda self: self.out[:, ps.O_VELOCITY_ALONG])
    acceleration_along = property(lambda self: self.out[:, ps.O_ACCELERATION_ALONG])
    parameters = property(lambda self: self.out[:, ps.O_PARAMETERS:ps.O_PARAMETERS + 4])
    parameter_std = property(lambda self: self.out[:, ps.O_STD:ps.O_STD + 4])
    nis = property(lambda self: self.out[:, ps.O_NIS])
    nis_average = property(lambda self: self.out[:, ps.O_NIS_AVERAGE])
    nis_bounds = property(lambda self: (self.out[:, ps.O_NIS_LO], self.out[:, ps.O_NIS_HI]))
    measurement_std = property(lambda self: self.out[:, ps.O_MEASUREMENT_STD])
    contact_level = property(lambda self: self.out[:, ps.O_CONTACT_LEVEL])
    jacobian_condition = property(lambda self: self.out[:, ps.O_CONDITION])
    kinematics_lag = property(lambda self: self.out[:, ps.O_LAG])
    bias_age = property(lambda self: self.out[:, ps.O_BIAS_AGE])
    in_contact = property(lambda self: self.out[:, ps.O_PHASE] == ps.PHASE_CONTACT)

    @property
    def _pattern(self) -> np.ndarray:
        return self.out[:, ps.O_PATTERN].astype(np.int64)

    @property
    def excited(self) -> np.ndarray:
        """(m, 4) bool."""
        return (self._pattern[:, None] >> np.arange(4)) & 1 == 1

    @property
    def parameter_converged(self) -> np.ndarray:
        """(m, 4) bool."""
        return (self._pattern[:, None] >> np.arange(4, 8)) & 1 == 1

    @property
    def converged(self) -> np.ndarray:
        """(m,) bool: all four converged."""
        return self._pattern & ALL_CONVERGED == ALL_CONVERGED


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
        nv = self.model.nv
        # the stages' state (see pipeline_step): the stage objects hold views into these
        self._S = np.zeros(ps.S_SIZE)
        self._JS = np.zeros((ps.JS_ROWS, nv))
        self._P3 = np.zeros((nv, 3, 3))
        self._out = np.zeros(ps.OUT_FIXED + 3 * nv)
        self._no_kinematics = np.zeros((6, 2))
        self._last_mass: np.ndarray | None = None
        self._last = (math.nan, False)   # time s and receive-time flag of the last processed sample
        self._configure(settings)
        S = self._S
        self.filter = EnvironmentFilter(
            settings, st=S[ps.S_FILTER:ps.S_FILTER + FILTER_STATE_SIZE],
            cf=S[ps.S_FILTER_CONFIG:ps.S_FILTER_CONFIG + FILTER_CONFIG_SIZE],
            fo=S[ps.S_FILTER_OUTPUT:ps.S_FILTER_OUTPUT + FILTER_OUTPUT_SIZE])
        self.reset()

    # --- configuration ---------------------------------------------------------------------
    def _configure(self, s: Settings) -> None:
        joints = self.model.joint_names
        nv = self.model.nv
        S, JS = self._S, self._JS
        gain = np.array(per_joint(s, "observer.gain", joints))
        kalman = s["observer.form"] == "kalman"
        old_obs = getattr(self, "observer", None)
        if old_obs is None or isinstance(old_obs, KalmanMomentumObserver) != kalman:
            storage = dict(sc=S[ps.S_OBSERVER:ps.S_OBSERVER + OBSERVER_SIZE],
                           rows=JS[ps.J_OBSERVER:ps.J_OBSERVER + OBSERVER_ROWS], cov=self._P3)
            self.observer = (KalmanMomentumObserver(gain, s["observer.velocity_noise"],
                                                    s["observer.effort_noise"],
                                                    s["observer.max_gap"], **storage)
                             if kalman else MomentumObserver(gain, s["observer.max_gap"],
                                                             **storage))
        else:
            self.observer.gain, self.observer.max_gap = gain, s["observer.max_gap"]
            if kalman:
                self.observer.velocity_noise = s["observer.velocity_noise"]
                self.observer.effort_noise = s["observer.effort_noise"]
        self.friction = FrictionModel(per_joint(s, "friction.viscous", joints),
                                      per_joint(s, "friction.coulomb", joints),
                                      s["friction.smoothing_velocity"],
                                      s["effort_side"] == "motor")
        JS[ps.J_VISCOUS], JS[ps.J_COULOMB] = self.friction.viscous, self.friction.coulomb
        S[ps.PS_FRICTION_ON] = self.friction.enabled
        S[ps.PS_FRICTION_EPS] = self.friction.eps
        old_bias = getattr(self, "bias", None)
        kept = None if old_bias is None else (old_bias.value.copy(), old_bias.last_learned)
        self.bias = BiasEstimator(per_joint(s, "bias.initial", joints), s["bias.time_constant"],
                                  s["bias.max_rate"], s["bias.limit"], s["bias.learn"],
                                  sc=S[ps.S_BIAS:ps.S_BIAS + BIAS_SIZE], value=JS[ps.J_BIAS])
        if kept is not None:  # keep what was learned
            self.bias.value[:], self.bias.last_learned = kept
        old_contact = getattr(self, "contact", None)
        kept = None if old_contact is None else (old_contact.noise_var, old_contact.in_contact)
        self.contact = ContactMonitor(
            nv, s["contact.enter_level"], s["contact.exit_level"], s["contact.hold_time"],
            s["contact.noise_floor"], s["contact.noise_time_constant"], s["contact.release_time"],
            sc=S[ps.S_CONTACT:ps.S_CONTACT + CONTACT_SIZE],
            rows=JS[ps.J_CONTACT:ps.J_CONTACT + CONTACT_ROWS])
        if kept is not None:
            self.contact.set_noise_var(kept[0])
            self.contact.in_contact = kept[1]
        self.wrench_map = WrenchMap(s["wrench.mode"] == "wrench", s["wrench.damping"])
        S[ps.PS_FULL_WRENCH] = self.wrench_map.full_wrench
        S[ps.PS_DAMPING2] = self.wrench_map.damping2
        old_dir = getattr(self, "direction", None)
        kept = None if old_dir is None else (old_dir.mode, old_dir.u.copy())
        self.direction = Direction(s["direction.mode"], s["direction.vector"],
                                   s["direction.window"], s["direction.hysteresis"],
                                   s["direction.min_travel"],
                                   sc=S[ps.S_DIRECTION:ps.S_DIRECTION + DIRECTION_SIZE])
        if kept is not None and kept[0] == self.direction.mode == "estimated":
            self.direction.u = kept[1]
        # lag of the force behind tau_ext that the regressor must match: first order 1/K_O;
        # the Kalman form has none for slowly varying forces (None: no matching filter)
        self._gain_mean = None if kalman else float(np.mean(gain))
        # the noise level is learned from the mean square over intervals of quiet samples: its
        # time constant is seconds, so one update per 10 ms learns the same as one per sample,
        # and the wrench's joint weights change only then
        noise_tc = s["contact.noise_time_constant"]
        S[ps.PS_NOISE_TC] = noise_tc
        S[ps.PS_LEARN_INTERVAL] = min(_LEARN_INTERVAL, noise_tc / 20.0)
        S[ps.PS_FORGET_AFTER] = s["contact.forget_after"]
        S[ps.PS_STARTUP_SETTING] = s["bias.startup"]
        S[ps.PS_PRIOR_MEAN:ps.PS_PRIOR_MEAN + 4] = s["filter.initial_mean"]
        S[ps.PS_PRIOR_STD:ps.PS_PRIOR_STD + 4] = s["filter.initial_std"]
        S[ps.PS_PRIOR_MEASUREMENT_STD] = s["filter.measurement_std"]
        self._health = Health(s["wrench.condition_limit"], s["health.min_rate"],
                              s["health.stale_after"])
        S[ps.PS_CONDITION_LIMIT] = s["wrench.condition_limit"]
        S[ps.PS_MIN_RATE] = s["health.min_rate"]
        S[ps.PS_STALE_AFTER] = s["health.stale_after"]

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
            self._drop_kinematics()

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
        self._drop_kinematics()
        S = self._S
        S[ps.PS_T_PREV] = S[ps.PS_T_START] = S[ps.PS_LAST_VALID] = math.nan
        S[ps.PS_STARTUP] = S[ps.PS_STARTUP_SETTING]
        S[ps.PS_CONTACT_END] = -math.inf   # time the last contact ended
        S[ps.PS_EVER_CONTACT] = S[ps.PS_QUIET_POSITION] = S[ps.PS_DT_AVG] = 0.0
        S[ps.PS_QUIET_DT] = S[ps.PS_QUIET_COUNT] = S[ps.PS_POINT_VALID] = 0.0
        self._JS[ps.J_QUIET] = 0.0
        self._reject_times: deque[float] = deque(maxlen=1000)

    def _drop_kinematics(self) -> None:
        """No AlongKinematics until the nominal interval is learned again."""
        self.kinematics: AlongKinematics | None = None
        self._kinematics_buffer = self._no_kinematics
        self._S[ps.S_KINEMATICS:ps.S_KINEMATICS + KINEMATICS_SIZE] = 0.0
        self._intervals: deque[float] = deque(maxlen=_KINEMATICS_WARMUP)

    @property
    def _t_prev(self) -> float | None:
        t = float(self._S[ps.PS_T_PREV])
        return None if math.isnan(t) else t

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
        startup = max(self.settings["bias.startup"], 0.5)
        self._S[ps.PS_T_START] = self._t_prev
        self._S[ps.PS_STARTUP] = startup
        return True, f"learning torque bias for {startup:.1f} s: keep the robot clear of contact"

    # --- one sample ---------------------------------------------------------------------
    def process(self, sample: Sample) -> Estimate | None:
        """One sample in, one Estimate out; None when the sample is rejected (and counted).
        :meth:`advance`, then :meth:`estimate`."""
        return self.estimate() if self.advance(sample) else None

    def advance(self, sample: Sample) -> bool:
        """One sample through every stage; True when it was processed (:meth:`estimate` and
        :meth:`last_outputs` then tell its results), False when it was rejected (and counted).

        The validator's checks of the numbers (finite values, stamps in order) run inside the
        compiled step, before anything changes; a sample they refuse goes to the validator
        itself, which names what is wrong."""
        n = len(sample.names)
        try:
            if not (len(sample.position) == len(sample.velocity) == len(sample.effort) == n):
                raise SampleRejected("length_mismatch", "")   # the validator says why
            q, v, effort = self.model.joint_map(sample.names).apply(sample)
        except (SampleRejected, IndexError):
            self._invalid(sample)
            return False
        t = float(sample.time)
        stamp_from_receive = sample.stamp_from_receive
        code = self._step(t, q, v, effort, self._out, stamp_from_receive)
        if code:
            self._refused(code, sample, t)
            return False
        self._last = (t, stamp_from_receive)
        return True

    def last_outputs(self) -> list[float]:
        """What the output messages carry, of the last sample :meth:`advance` processed, as 14
        floats: force (3) N and torque (3) N·m the robot applies, world frame (torque 0 when
        ``wrench.mode`` is force), then the parameters [mass kg, damping N·s/m, stiffness N/m,
        static force N] and their four standard deviations (same units). The same numbers as
        :meth:`estimate`'s, without building it (the node's per-message path)."""
        o = self._out
        torque = (o[ps.O_TORQUE:ps.O_TORQUE + 3] if self.wrench_map.full_wrench
                  else self.wrench_map.no_torque)   # as estimate() takes it
        return (o[ps.O_FORCE:ps.O_FORCE + 3].tolist() + torque.tolist()
                + o[ps.O_PARAMETERS:ps.O_STD + 4].tolist())

    @property
    def observer_restarts(self) -> int:
        """Times the momentum observer restarted (a gap longer than ``observer.max_gap`` s),
        as of the last processed sample."""
        return int(self._out[ps.O_RESTARTS])

    def estimate(self) -> Estimate:
        """The Estimate of the last sample :meth:`advance` processed (built from its results,
        with the reject counts as they stand now: call it before the next sample)."""
        t, stamp_from_receive = self._last
        o = self._out.copy()
        (_, _, _, _, _, _, _, _, _, force_along, position_along, velocity_along,
         acceleration_along, _, _, _, _, _, _, _, _, nis, nis_avg, nis_lo, nis_hi, meas_std,
         contact_level, condition, rate, lag, bias_age, phase, event, pattern, _,
         startup_remaining, since_contact_end, change, change_g, restarts, _, _, _, _, _, _,
         _, _, level, state, findings) = o[:ps.O_FINDINGS + 1].tolist()
        event_word = (ps.EVENTS[int(event)] if event != ps.EV_CHANGE else
                      "change: " + change_text(int(change), change_g,
                                               self.filter._cfg.change_threshold))
        pattern = int(pattern)
        state = int(state)
        message = self._health.message(
            state, int(findings), startup_remaining, since_contact_end, pattern, nis_avg, nis_lo,
            nis_hi, condition, len(self._reject_times), rate)
        nv = self.model.nv
        of = ps.OUT_FIXED
        # positional, in the field order of Estimate (a keyword call costs ~40 % more here)
        return Estimate(
            t, o[0:3], o[3:6] if self.wrench_map.full_wrench else self.wrench_map.no_torque,
            o[6:9], force_along, position_along, velocity_along, acceleration_along, o[13:17],
            o[17:21], _FLAG_ARRAYS[pattern & 15], _FLAG_ARRAYS[pattern >> 4],
            pattern & ALL_CONVERGED == ALL_CONVERGED, phase == 2.0, PHASES[int(phase)],
            int(level), STATES[state], message, nis, nis_avg, (nis_lo, nis_hi), meas_std, o[of:of + nv],
            o[of + nv:of + 2 * nv], bias_age, contact_level, condition, int(restarts),
            self.rejects.total, rate, lag, event_word, stamp_from_receive)

    def process_block(self, block: SampleBlock) -> EstimateBlock:
        """The samples of a block, in order, as :meth:`process` would take them one by one
        (same numbers, same refusals and counts, same level and state), for a recording: the
        joint mapping is made once for the block, the Pinocchio calls for all its samples, and
        then one compiled call (:func:`~.pipeline_step.pipeline_run`) runs the step on sample
        after sample, the health level and state included, returning to Python only at a
        refusal (no Estimate, no message). Until the nominal interval is learned, and for a
        block whose arrays or names do not fit, samples go one at a time."""
        k = len(block)
        out = np.empty((k, len(self._out)))
        keep = np.ones(k, bool)
        n = len(block.names)
        try:
            if not (block.position.shape == block.velocity.shape == block.effort.shape
                    == (k, n)):
                raise SampleRejected("length_mismatch", "")
            Q, V, E = (np.ascontiguousarray(a, dtype=float)
                       for a in self.model.joint_map(block.names).apply_block(block))
        except (SampleRejected, IndexError):
            for i in range(k):   # one by one: the validator names what is wrong
                if not self.advance(block.sample(i)):
                    keep[i] = False
                else:
                    out[i] = self._out
            return self._block_estimates(block, out, keep)
        T = np.ascontiguousarray(block.time, dtype=float)
        receive = np.ascontiguousarray(block.stamp_from_receive, dtype=float)
        H, M, C, G, J = self.model.terms_block(Q, V)
        i = 0
        while i < k:
            if self.kinematics is None:   # learning the nominal interval: one at a time
                t = float(T[i])
                code = self._step(t, Q[i], V[i], E[i], out[i], bool(receive[i]),
                                  (H[i], M[i], C[i], G[i], J[i]))
            else:
                times = np.array(self._reject_times) if self._reject_times else _NO_TIMES
                i, code = ps.pipeline_run(self._S, self._JS, self._P3, self._kinematics_buffer,
                                          self.filter.windows_array, out, i, T, Q, V, E, M, C,
                                          G, J, H, receive, times)
                if i == k:
                    break
                t = float(T[i])
                self._forget_rejects(t)
            if code:
                keep[i] = False
                self._refused(code, block.sample(i), t)
            i += 1
        if k:
            self._last_mass = M[-1]
            self._forget_rejects(float(T[-1]))
        return self._block_estimates(block, out, keep)

    @staticmethod
    def _block_estimates(block: SampleBlock, out: np.ndarray, keep: np.ndarray
                         ) -> EstimateBlock:
        if not keep.all():
            out = out[keep]
        return EstimateBlock(block.time[keep], out, out[:, ps.O_LEVEL].astype(np.int8),
                             _STATE_WORDS[out[:, ps.O_STATE].astype(np.intp)])

    # --- what the last sample did inside (for the tuning command) ---------------------------
    def filter_input(self) -> tuple[float, tuple[float, ...], float, np.ndarray] | None:
        """The environment filter's update at the last processed sample, or None when the
        filter was not updated then: (t s, h (4,) [x'' m/s^2, x' m/s, x m, 1], f N, excited
        (4,) bool)."""
        out = self._out
        if out[ps.O_UPDATED] != 1.0:
            return None
        fo = self.filter._fo
        return (float(fo[EO_T]), tuple(fo[EO_H:EO_H + 4].tolist()), float(fo[EO_F]),
                _FLAG_ARRAYS[int(out[ps.O_PATTERN]) & 15])

    def last_regained(self) -> bool:
        """True when the last processed sample began a contact after one that had ended (the
        filter's covariance was inflated, before its update at that sample)."""
        return bool(self._out[ps.O_REGAINED])

    def last_raw_residual(self) -> np.ndarray:
        """(nv,) N·m: the observer's output at the last processed sample, before the bias."""
        nv = self.model.nv
        return self._out[ps.OUT_FIXED + 2 * nv:ps.OUT_FIXED + 3 * nv].copy()

    def last_mass_matrix(self) -> np.ndarray | None:
        """(nv, nv): M(q) at the last processed sample (None before the first)."""
        return self._last_mass

    # --- helpers ---------------------------------------------------------------------------
    def _step(self, t: float, q: np.ndarray, v: np.ndarray, effort: np.ndarray,
              row: np.ndarray, stamp_from_receive: bool,
              terms: tuple[np.ndarray, ...] | None = None) -> int:
        """One sample's Pinocchio calls (unless ``terms`` holds them, as
        :meth:`RobotModel.terms` returns them) and compiled step, its output in ``row``;
        returns the step's code (0: done). The reject times older than a second are dropped
        first: the step counts the others."""
        if self.kinematics is None:
            self._warm_up(t)
        pose, mass, coriolis, gravity, jacobian = (self.model.terms(q, v) if terms is None
                                                   else terms)
        self._last_mass = mass
        S = self._S
        S[ps.PS_RECENT_REJECTS] = self._forget_rejects(t)
        S[ps.PS_FROM_RECEIVE] = stamp_from_receive
        return ps.pipeline_step(S, self._JS, self._P3, self._kinematics_buffer,
                                self.filter.windows_array, row, t, q, v, effort, mass, coriolis,
                                gravity, jacobian, pose)

    def _forget_rejects(self, t: float) -> int:
        """Drop the reject times more than a second before ``t`` s; returns how many are left."""
        reject_times = self._reject_times
        while reject_times and reject_times[0] < t - 1.0:
            reject_times.popleft()
        return len(reject_times)

    def _refused(self, code: int, sample: Sample, t: float) -> None:
        if code == ps.STEP_INVALID_SAMPLE:
            return self._invalid(sample)
        return self._step_refused(code, t)

    def _invalid(self, sample: Sample) -> None:
        """A sample refused before any stage saw it: the validator (with the last valid stamp)
        names the reason, else the joint mapping does; the rejection is counted."""
        last = float(self._S[ps.PS_LAST_VALID])
        validator = self.validator
        validator.last_time = None if math.isnan(last) else last
        try:
            validator.check(sample)
            # the numbers are fine (and the stamp now counts as seen, as it did before the
            # joint names were looked at): the joint names are what is wrong
            self._S[ps.PS_LAST_VALID] = validator.last_time
            self.model.joint_map(sample.names)
            raise SampleRejected("unknown_joint", f"joint state cannot be mapped onto the "
                                 f"model's joints {list(self.model.joint_names)}")
        except SampleRejected as exc:
            self._reject(sample.time, exc)
        return None

    def _step_refused(self, code: int, t: float) -> None:
        if code == ps.STEP_NON_FINITE_WRENCH:
            self.observer.reset()
            self._reject(t, SampleRejected("non_finite_output",
                                           "the wrench came out non-finite; observer restarted"))
            return None
        h0, h1, h2, h3, f, tc = self._out[ps.O_ROW:ps.O_ROW + 6].tolist()
        try:
            self.filter._refuse(int(self._out[ps.O_UPDATED]), tc, (h0, h1, h2, h3), f)
        except SampleRejected as exc:
            self._reject(t, exc)
        return None

    def _reject(self, t: float, exc: SampleRejected) -> None:
        self.rejects.add(exc)
        self._reject_times.append(t)

    def _warm_up(self, t: float) -> None:
        """Learn the nominal interval; build AlongKinematics once it is known."""
        t_prev = self._t_prev
        dt = 0.0 if t_prev is None else t - t_prev
        if dt > 0:
            self._intervals.append(dt)
        if len(self._intervals) < _KINEMATICS_WARMUP:
            return
        s = self.settings
        self.kinematics = AlongKinematics(
            s["kinematics.window"], s["kinematics.polyorder"], float(np.median(self._intervals)),
            self._gain_mean, sc=self._S[ps.S_KINEMATICS:ps.S_KINEMATICS + KINEMATICS_SIZE])
        self._kinematics_buffer = self.kinematics.buffer
