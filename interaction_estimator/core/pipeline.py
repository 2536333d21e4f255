"""Pipeline: Sample -> Estimate. The only place that composes the stages.

validate -> RobotModel (Pinocchio) -> MomentumObserver (bias and friction removed) ->
ContactMonitor -> WrenchMap -> Direction and kinematics along u -> object model and
EnvironmentFilter -> Health.

The ROS node and the replay command both feed :class:`Sample` records into :meth:`Pipeline.process`
(or blocks of them into :meth:`Pipeline.process_block`) and turn the outputs into messages or file
rows; for the same samples and settings they get the same numbers. Memory is bounded: no history
grows with run length.

Per sample the Pipeline checks the lengths, maps the sample onto the model's joints, makes the
Pinocchio calls, and then runs every stage in one compiled call (:mod:`.step`) on the stages'
records (:class:`~.storage.Storage`): each stage object below holds views of its records in that
storage, so a stage's methods and the step see the same numbers. The
outputs are records of :mod:`.outputs`, from which the :class:`Estimate`, the table columns and
the messages' numbers are read.
"""
from __future__ import annotations

import math
from collections import deque
from collections.abc import Callable

import numpy as np

from . import mechanism, outputs, step, storage
from .base import BASE_OK, BaseInput, ImuMessage, OdometryMessage
from .base import REASONS as BASE_REASONS
from .compensation import BiasEstimator, FrictionModel
from .contact import ContactMonitor
from .direction import Direction
from .environment import UPDATED, EnvironmentFilter, change_text
from .health import FINDING_IMU, FINDING_ODOMETRY, Health
from .kinematics import SPATIAL_RING, AlongKinematics, spatial_placeholder, spatial_reset
from .model import RobotModel
from .object_models import (
    MATCH_FIRST_ORDER,
    MATCH_KALMAN,
    MODEL_PRISMATIC,
    MODEL_REVOLUTE,
    ObjectModel,
    model_named,
    new_records,
)
from .observer import KalmanMomentumObserver, MomentumObserver
from .outputs import EV_CHANGE, EVENTS, Estimate, EstimateBlock
from .samples import RejectCounts, Sample, SampleBlock, SampleRejected, SampleValidator
from .settings import Settings, per_joint
from .wrench import WrenchMap

_LEARN_INTERVAL = 0.01  # s: longest interval of quiet samples between noise-level updates
_KINEMATICS_WARMUP = 10  # intervals that give the nominal sample interval for the kinematics
_NO_TIMES = np.zeros(0)

__all__ = ["Estimate", "EstimateBlock", "Pipeline"]


class Pipeline:
    """The estimator. ``Pipeline(settings, urdf_text)``; then :meth:`process` per sample.

    Raises ModelError (bad URDF, unknown contact frame) or SettingsError (per-joint lists that do
    not fit the model) at construction.

    With ``base.source: odometry`` the base's state comes from :meth:`add_odometry` and
    :meth:`add_imu` (see :mod:`.base`): a recording's messages all given first
    (``whole_recording=True`` keeps them all), then its joint states through :meth:`process` or
    :meth:`process_block`; or, as they arrive (the node), joint states through :meth:`submit`,
    which holds each until the base's messages around its stamp are there.
    """

    def __init__(self, settings: Settings, urdf: str, object_model: ObjectModel | None = None,
                 whole_recording: bool = False):
        self.settings = settings
        floating = settings["base.source"] == "odometry"
        self.model = RobotModel(urdf, settings["contact_frame"], settings["gravity"],
                                floating_base=floating)
        if object_model is None:
            object_model = model_named(settings["environment.model"])
        self.object_model = object_model
        self.validator = SampleValidator()
        self.rejects = RejectCounts()
        self.base: BaseInput | None = None
        if floating:
            for reason in BASE_REASONS:
                self.rejects.counts.setdefault(reason, 0)
            self.base = BaseInput(self.model, settings["base.imu"], settings["base.max_age"],
                                  settings["base.velocity_noise"], settings["base.rate_noise"],
                                  self._reject, bounded=not whole_recording)
        nv, m = len(self.model.joint_names), object_model.size
        self._mechanism_kind = (mechanism.KIND_REVOLUTE if object_model.code == MODEL_REVOLUTE
                                else mechanism.KIND_PRISMATIC
                                if object_model.code == MODEL_PRISMATIC
                                else mechanism.KIND_NONE)
        st = self._storage = storage.new_storage(
            nv, m, object_model.channels, mechanism.path_capacity(self._mechanism_kind))
        self._pipe_params, self._pipe = st.params["pipeline"], st.state["pipeline"]
        self._out = outputs.SAMPLE.one()               # the last sample's outputs
        self._out_params = outputs.PARAMETER.many(m)
        self._out_joints = outputs.JOINT.many(nv)
        self._last_mass: np.ndarray | None = None
        self._last = (math.nan, False)   # time s and receive-time flag of the last processed sample
        self.filter = EnvironmentFilter(settings, object_model, storage.filter_views(st))
        self._configure(settings)
        self._step = step.pipeline_step.prepare()   # compiled (or loaded) once, then fixed
        self._run = step.pipeline_run.prepare()
        self.reset()

    # --- configuration ---------------------------------------------------------------------
    def _configure(self, s: Settings) -> None:
        joints = self.model.joint_names
        nv = len(joints)
        if self.base is not None:
            self.base.max_age = s["base.max_age"]
            self.base.velocity_noise = s["base.velocity_noise"]
            self.base.rate_noise = s["base.rate_noise"]
        gain = np.array(per_joint(s, "observer.gain", joints))
        kalman = s["observer.form"] == "kalman"
        st = self._storage
        old_obs = getattr(self, "observer", None)
        if old_obs is None or isinstance(old_obs, KalmanMomentumObserver) != kalman:
            records = storage.observer_views(st)
            self.observer = (KalmanMomentumObserver(gain, s["observer.velocity_noise"],
                                                    s["observer.effort_noise"],
                                                    s["observer.max_gap"], records=records)
                             if kalman else MomentumObserver(gain, s["observer.max_gap"],
                                                             records=records))
        else:
            self.observer.gain, self.observer.max_gap = gain, s["observer.max_gap"]
            if isinstance(self.observer, KalmanMomentumObserver):
                self.observer.velocity_noise = s["observer.velocity_noise"]
                self.observer.effort_noise = s["observer.effort_noise"]
        self.friction = FrictionModel(per_joint(s, "friction.viscous", joints),
                                      per_joint(s, "friction.coulomb", joints),
                                      s["friction.smoothing_velocity"],
                                      s["effort_side"] == "motor", storage.friction_views(st))
        old_bias = getattr(self, "bias", None)
        kept = None if old_bias is None else (old_bias.value, old_bias.last_learned)
        self.bias = BiasEstimator(per_joint(s, "bias.initial", joints), s["bias.time_constant"],
                                  s["bias.max_rate"], s["bias.limit"], s["bias.learn"],
                                  storage.bias_views(st))
        if kept is not None:  # keep what was learned
            self.bias.value, self.bias.last_learned = kept
        # the noise level is learned from the mean square over intervals of quiet samples: its
        # time constant is seconds, so one update per 10 ms learns the same as one per sample,
        # and the wrench's joint weights change only then
        noise_tc = s["contact.noise_time_constant"]
        contact_settings = (s["contact.enter_level"], s["contact.exit_level"],
                            s["contact.hold_time"], s["contact.noise_floor"], noise_tc,
                            s["contact.release_time"], min(_LEARN_INTERVAL, noise_tc / 20.0),
                            s["contact.evidence"])
        if getattr(self, "contact", None) is None:
            self.contact = ContactMonitor(nv, *contact_settings,
                                          records=storage.contact_views(st))
        else:
            self.contact.configure(*contact_settings)
        self.wrench_map = WrenchMap(s["wrench.mode"] == "wrench", s["wrench.damping"],
                                    s["wrench.condition_limit"], st.params["wrench"])
        old_dir = getattr(self, "direction", None)
        kept = None if old_dir is None else (old_dir.mode, old_dir.u)
        self.direction = Direction(s["direction.mode"], s["direction.vector"],
                                   s["direction.window"], s["direction.hysteresis"],
                                   s["direction.min_travel"], st.params["direction"],
                                   st.state["direction"])
        if kept is not None and kept[0] == self.direction.mode == "estimated":
            self.direction.u = kept[1]
        # the force is the observer's output: the measurement row passes through the same
        # dynamics (object_models), the first-order law or the Kalman form's steady state
        match = MATCH_KALMAN if kalman else MATCH_FIRST_ORDER
        self._model_records = new_records(self.object_model, match, float(np.mean(gain)),
                                          storage.model_views(st), s["filter.nonnegative"])
        mp = st.params["mechanism"][0]
        mp["kind"] = self._mechanism_kind
        mp["min_travel_m"] = s["mechanism.min_travel"]
        mp["min_arc_rad"] = math.radians(s["mechanism.min_arc"])
        mp["converged_travel_m"] = s["mechanism.converged_travel"]
        mp["tolerance_m"] = s["mechanism.path_tolerance"]
        mp["max_radius_m"] = s["mechanism.max_radius"]
        self._health = Health(s["wrench.condition_limit"], s["health.min_rate"],
                              s["health.stale_after"], self.object_model.parameter_names,
                              st.params["health"])
        p = self._pipe_params[0]
        p["startup_s"] = s["bias.startup"]
        p["forget_after_s"] = s["contact.forget_after"]
        self._storage_changed()

    def _storage_changed(self) -> None:
        """The arrays whose size changes (the filter's windows, the kinematics ring) into the
        tuple the compiled step takes."""
        kin = getattr(self, "kinematics", None)
        fr = self.filter.records
        ring, coefficients = ((kin.ring, kin.coefficients) if kin is not None
                              else (self._storage.ring, self._storage.coefficients))
        self._storage = self._storage._replace(
            nis_bounds=fr.nis_bounds, nis_ring=fr.nis_ring, history_time=fr.history_time,
            history_force=fr.history_force, history_regressor=fr.history_regressor,
            block_force=fr.block_force, block_regressor=fr.block_regressor,
            lag_ring=fr.lag_ring, hac=fr.hac,
            ring=ring, coefficients=coefficients,
            spatial_ring=getattr(self, "_spatial_ring", self._storage.spatial_ring))

    def apply_settings(self, settings: Settings) -> None:
        """Apply changed settings while running; learned state (bias, noise, estimates) is kept.

        Settings marked read-only in the registry (contact frame, gravity, URDF source, joint
        order) need a new Pipeline; the node refuses to change them at runtime.
        """
        changed_kin = any(settings[k] != self.settings[k]
                          for k in ("kinematics.window", "kinematics.polyorder"))
        self.filter.update_settings(settings)
        self._configure(settings)
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
        s = self._pipe[0]
        s["started"] = s["has_valid"] = False
        s["learning_pending"] = True
        s["learning_s"] = self._pipe_params[0]["startup_s"]
        s["contact_end_s"] = -math.inf   # time the last contact ended
        s["ever_contact"] = s["point_valid"] = False
        s["quiet_position_m"] = s["dt_average_s"] = 0.0
        s["quiet_point"] = 0.0
        mechanism.mechanism_reset(self._storage.state["mechanism"][0])
        self._reject_times: deque[float] = deque(maxlen=1000)

    def _drop_kinematics(self) -> None:
        """No kinematics until the nominal interval is learned again."""
        self.kinematics: AlongKinematics | None = None
        self._spatial_ring = spatial_placeholder()
        self._storage.params[0]["kinematics"]["ready"] = False
        self._model_records.state["filtered"] = False
        self._intervals: deque[float] = deque(maxlen=_KINEMATICS_WARMUP)
        self._storage_changed()

    @property
    def _t_prev(self) -> float | None:
        s = self._pipe[0]
        return float(s["last_time_s"]) if s["started"] else None

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
        s = self._pipe[0]
        s["learning_pending"] = False
        s["learning_start_s"] = self._t_prev
        s["learning_s"] = startup
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
        base = self.base
        if base is not None:   # the base's state at t, or the sample is stale
            if not math.isfinite(t):
                self._invalid(sample)
                return False
            times = np.array([t])
            Qb, Vb, codes, upper = base.states(times)
            if codes[0] != BASE_OK:
                self._reject(t, base.stale(t, int(codes[0])))
                return False
            q[:7] = Qb[0]
            v[:6] = Vb[0]
            self._pipe[0]["base_findings"] = base.findings(times, upper)[0]
        code = self._one(t, q, v, effort, stamp_from_receive)
        if code:
            self._refused(code, sample, t)
            return False
        self._last = (t, stamp_from_receive)
        return True

    def last_outputs(self) -> list[float]:
        """What the output messages carry, of the last sample :meth:`advance` processed: force
        (3) N and torque (3) N·m the robot applies, world frame (torque 0 when ``wrench.mode``
        is force), then the object model's m parameters (default [mass kg, damping N·s/m,
        stiffness N/m, static force N]) and their m standard deviations (same units). The same
        numbers as :meth:`estimate`'s, without building it (the node's per-message path)."""
        return outputs.message_numbers(self._out, self._out_params,
                                       self.wrench_map.full_wrench)

    @property
    def observer_restarts(self) -> int:
        """Times the momentum observer restarted (a gap longer than ``observer.max_gap`` s),
        as of the last processed sample."""
        return int(self._out["observer_restarts"][0])

    def estimate(self) -> Estimate:
        """The Estimate of the last sample :meth:`advance` processed (a copy of its output
        records; the reject counts are those of now: call it before the next sample)."""
        t, stamp_from_receive = self._last
        return Estimate(t, outputs.frozen_copy(self._out), outputs.frozen_copy(self._out_params),
                        outputs.frozen_copy(self._out_joints),
                        stamp_from_receive, self.rejects.total,
                        self.object_model.parameter_names, self.wrench_map.full_wrench,
                        self._words(len(self._reject_times)), self.object_model.name)

    def _words(self, recent_rejects: int) -> Callable[[Estimate], tuple[str, str]]:
        """The wording of an Estimate's verdict and event (made when first asked for)."""
        health, threshold = self._health, self.filter.change_threshold
        base = self.base

        def words(e: Estimate) -> tuple[str, str]:
            o = e.record[0]
            event = int(o["event"])
            event_word = (EVENTS[event] if event != EV_CHANGE else
                          "change: " + change_text(int(o["change"]), float(o["change_g"]),
                                                   threshold))
            nis_lo, nis_hi = e.nis_bounds
            message = health.message(
                int(o["state"]), int(o["findings"]), float(o["startup_remaining_s"]),
                float(o["since_contact_end_s"]), tuple(e.excited.tolist()),
                tuple(e.parameter_converged.tolist()), e.nis_average, nis_lo, nis_hi,
                e.jacobian_condition, recent_rejects, e.rate_hz)
            if kind != mechanism.KIND_NONE and e.in_contact:
                message = f"{message}; {mechanism_words(e)}"
            if base is not None and int(o["findings"]) & (FINDING_ODOMETRY | FINDING_IMU):
                message += "; " + base.describe(int(o["findings"]))
            return message, event_word

        kind, mechanism_words = self._mechanism_kind, self._mechanism_words
        return words

    def _mechanism_words(self, e: Estimate) -> str:
        """The mechanism's geometry in words (in contact, revolute and prismatic models)."""
        s = self.settings
        code = e.geometry
        tolerance_mm = 1e3 * s["mechanism.path_tolerance"]
        rms_mm = 1e3 * e.path_rms
        hinge = self._mechanism_kind == mechanism.KIND_REVOLUTE
        held = "parameters held at their prior"
        if code == mechanism.GEOMETRY_SHORT or code == mechanism.GEOMETRY_NONE:
            return (f"path {100 * e.travel:.1f} cm, shorter than mechanism.min_travel "
                    f"{100 * s['mechanism.min_travel']:.1f} cm: geometry not fitted yet, {held}")
        if code == mechanism.GEOMETRY_NO_FIT:
            return (f"path fits neither a {'circle' if hinge else 'line'} nor a "
                    f"{'line' if hinge else 'circle'} (RMS {rms_mm:.2f} mm, "
                    f"mechanism.path_tolerance {tolerance_mm:.2f} mm): too noisy or no "
                    f"{'hinge' if hinge else 'slider'}; {held}")
        if code == mechanism.GEOMETRY_STRAIGHT:
            return (f"path straight so far over {100 * e.travel:.1f} cm (no circle of radius "
                    f"up to mechanism.max_radius {s['mechanism.max_radius']:g} m is determined):"
                    f" no hinge located (a slider is environment.model prismatic); {held}")
        if code == mechanism.GEOMETRY_CURVED:
            return (f"path curved (line RMS {rms_mm:.2f} mm > mechanism.path_tolerance "
                    f"{tolerance_mm:.2f} mm; a circle fits): not a slider (a hinge is "
                    f"environment.model revolute); {held}")
        if hinge:
            swept, needed = math.degrees(e.swept_arc), s["mechanism.min_arc"]
            if code == mechanism.GEOMETRY_CONVERGED:
                return (f"hinge radius {e.radius:.3f} m, swept {swept:.1f} deg >= "
                        f"mechanism.min_arc {needed:g} deg: axis and radius converged")
            return (f"hinge radius {e.radius:.3f} m, swept {swept:.1f} deg of mechanism.min_arc "
                    f"{needed:g} deg: axis and radius not converged yet")
        travel, needed = 100 * e.travel, 100 * s["mechanism.converged_travel"]
        if code == mechanism.GEOMETRY_CONVERGED:
            return (f"slider axis converged after {travel:.1f} cm (mechanism.converged_travel "
                    f"{needed:.1f} cm)")
        return (f"slider travel {travel:.1f} cm of mechanism.converged_travel {needed:.1f} cm: "
                "axis not converged yet")

    def process_block(self, block: SampleBlock) -> EstimateBlock:
        """The samples of a block, in order, as :meth:`process` would take them one by one
        (same numbers, same refusals and counts, same level and state), for a recording: the
        joint mapping is made once for the block, the Pinocchio calls for all its samples, and
        then one compiled call (:func:`~.step.pipeline_run`) runs the step on sample after
        sample, the health level and state included, returning to Python only at a refusal (no
        Estimate, no message). Until the nominal interval is learned, and for a block whose
        arrays or names do not fit, samples go one at a time."""
        k = len(block)
        rows = outputs.SAMPLE.many(k)
        parameter_rows = outputs.PARAMETER.many(k * self.object_model.size).reshape(
            k, self.object_model.size)
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
                    rows[i] = self._out[0]
                    parameter_rows[i] = self._out_params
            return self._block_estimates(block, rows, parameter_rows, keep)
        T = np.ascontiguousarray(block.time, dtype=float)
        receive = np.ascontiguousarray(block.stamp_from_receive, dtype=np.bool_)
        arrays = (T, Q, V, E, receive, rows, parameter_rows, keep)
        if self.base is None:
            self._rows(block, arrays, 0, k)
        else:
            self._rows_with_base(block, arrays)
        if k:
            self._forget_rejects(float(T[-1]))
            last = np.flatnonzero(keep)
            if len(last):
                self._out[0] = rows[last[-1]]
                self._out_params[:] = parameter_rows[last[-1]]
        return self._block_estimates(block, rows, parameter_rows, keep)

    def _rows(self, block: SampleBlock, arrays: tuple[np.ndarray, ...], lo: int,
              hi: int) -> None:
        """Samples lo..hi-1 of a block (arrays: T, Q, V, E, receive, rows, parameter_rows, keep
        of the whole block) through the step: the Pinocchio calls for all of them, then one
        compiled call over them, returning to Python only at a refusal, or one at a time while
        the kinematics learns the nominal interval."""
        T, Q, V, E, receive, rows, parameter_rows, keep = arrays
        H, M, C, G, J = self.model.terms_block(Q[lo:hi], V[lo:hi])
        if hi > lo:
            self._last_mass = M[-1]
        sub = (T[lo:hi], Q[lo:hi], V[lo:hi], E[lo:hi])
        i = lo
        while i < hi:
            if self.kinematics is None:   # learning the nominal interval: one at a time
                t = float(T[i])
                r = i - lo
                code = self._one(t, Q[i], V[i], E[i], bool(receive[i]),
                                 (H[r], M[r], C[r], G[r], J[r]))
                rows[i] = self._out[0]
                parameter_rows[i] = self._out_params
            else:
                times = np.array(self._reject_times) if self._reject_times else _NO_TIMES
                r, code = self._run(self._storage, i - lo, *sub, M, C, G, J, H,
                                    receive[lo:hi], times, rows[lo:hi], parameter_rows[lo:hi],
                                    self._out_joints)
                i = r + lo
                if i == hi:
                    break
                t = float(T[i])
                self._forget_rejects(t)
            if code:
                keep[i] = False
                self._out[0] = rows[i]   # the refused step's figures (filter row, codes)
                self._refused(code, block.sample(i), t)
            i += 1

    def _rows_with_base(self, block: SampleBlock, arrays: tuple[np.ndarray, ...]) -> None:
        """A block's samples with a moving base: the base's state at every stamp, then the
        runs of samples that have one (and the same base findings) through :meth:`_rows`, the
        stale ones rejected in between, in stamp order as the node does."""
        base = self.base
        assert base is not None
        T, Q, V, E, receive, rows, parameter_rows, keep = arrays
        k = len(T)
        finite = np.isfinite(T)
        times = np.where(finite, T, 0.0)
        Qb, Vb, codes, upper = base.states(times)
        Q[:, :7] = Qb
        V[:, :6] = Vb
        problems = {}
        for bad in np.flatnonzero((codes != BASE_OK) & finite).tolist():
            problems[bad] = base.stale(float(T[bad]), int(codes[bad]))
        findings = base.findings(times, upper)
        usable = (codes == BASE_OK) & finite
        i = 0
        while i < k:
            if not usable[i]:
                keep[i] = False
                if i in problems:
                    self._reject(float(T[i]), problems[i])
                else:
                    self._invalid(block.sample(i))   # the validator names the bad stamp
                i += 1
                continue
            j = i + 1
            while j < k and usable[j] and findings[j] == findings[i]:
                j += 1
            self._pipe[0]["base_findings"] = findings[i]
            self._rows(block, arrays, i, j)
            i = j

    # --- a moving base's inputs (base.source odometry) ---------------------------------------
    @property
    def world_frame(self) -> str:
        """The frame of every position and force output: the URDF's root link, or with a
        moving base the odometry's frame_id (empty until its first message)."""
        return self.base.world_frame if self.base is not None else self.model.root_frame

    def add_odometry(self, msg: OdometryMessage,
                     on_done: Callable[[Sample], None] | None = None) -> int:
        """One odometry message (refused and counted when unusable); then the held joint
        states it makes decidable are processed (see :meth:`submit`). Returns how many."""
        self._need_base().add_odometry(msg)
        return self._release(on_done)

    def add_imu(self, msg: ImuMessage, on_done: Callable[[Sample], None] | None = None) -> int:
        """One IMU message; as :meth:`add_odometry`."""
        self._need_base().add_imu(msg)
        return self._release(on_done)

    def submit(self, sample: Sample, on_done: Callable[[Sample], None] | None = None) -> int:
        """One joint state as it arrives (the node). Without a moving base: :meth:`advance`.
        With one: held until the base's messages around its stamp have arrived (or cannot come
        in time), then advanced; ``on_done(sample)`` is called after each sample that was
        processed, while :meth:`last_outputs` and :meth:`estimate` tell its results. Returns
        the number of samples processed by this call."""
        if self.base is None:
            if self.advance(sample):
                if on_done is not None:
                    on_done(sample)
                return 1
            return 0
        self.base.hold(sample)
        return self._release(on_done)

    def flush(self, on_done: Callable[[Sample], None] | None = None) -> int:
        """The joint states still held (the end of a recording): processed or rejected."""
        if self.base is None:
            return 0
        return self._advance_all(self.base.release_all(), on_done)

    def held(self) -> int:
        """Joint states held waiting for the base's messages."""
        return len(self.base.queue) if self.base is not None else 0

    def _release(self, on_done: Callable[[Sample], None] | None) -> int:
        return self._advance_all(self.base.ready() if self.base is not None else [], on_done)

    def _advance_all(self, samples: list[Sample],
                     on_done: Callable[[Sample], None] | None) -> int:
        done = 0
        for sample in samples:
            if self.advance(sample):
                done += 1
                if on_done is not None:
                    on_done(sample)
        return done

    def _need_base(self) -> BaseInput:
        if self.base is None:
            raise ValueError("odometry and IMU messages are used only with base.source: "
                             "odometry (the base is written as joints of the URDF now)")
        return self.base

    def _block_estimates(self, block: SampleBlock, rows: np.ndarray,
                         parameter_rows: np.ndarray, keep: np.ndarray) -> EstimateBlock:
        if not keep.all():
            rows, parameter_rows = rows[keep], parameter_rows[keep]
        return EstimateBlock(np.asarray(block.time, dtype=float)[keep], rows, parameter_rows,
                             self.object_model)

    # --- what the last sample did inside (for the tuning command) ---------------------------
    def filter_input(self) -> tuple[float, tuple[float, ...], float, np.ndarray] | None:
        """The environment filter's block update at the last processed sample, or None when no
        block was used then: (t s, h (m,) the block's mean regressor, f N its mean force,
        excited (m,) bool)."""
        if self._out["filter_code"][0] != UPDATED:
            return None
        fr = self.filter.records
        return (float(fr.output["time_s"][0]),
                tuple(fr.parameter_output["regressor"].tolist()),
                float(fr.output["force"][0]), fr.parameter_output["excited"].copy())

    def last_regained(self) -> bool:
        """True when the last processed sample began a contact after one that had ended (the
        filter's covariance was inflated, before its update at that sample)."""
        return bool(self._out["regained"][0])

    def last_raw_residual(self) -> np.ndarray:
        """(nv,) N·m: the observer's output at the last processed sample, before the bias."""
        return self._out_joints["raw_residual"].copy()

    def last_mass_matrix(self) -> np.ndarray | None:
        """(nv, nv): M(q) at the last processed sample (None before the first)."""
        return self._last_mass

    # --- helpers ---------------------------------------------------------------------------
    def _one(self, t: float, q: np.ndarray, v: np.ndarray, effort: np.ndarray,
             stamp_from_receive: bool, terms: tuple[np.ndarray, ...] | None = None) -> int:
        """One sample's Pinocchio calls (unless ``terms`` holds them, as
        :meth:`RobotModel.terms` returns them) and compiled step, its outputs in the Pipeline's
        output records; returns the step's code (0: done). The reject times older than a second
        are dropped first: the step counts the others."""
        if self.kinematics is None:
            self._warm_up(t)
        pose, mass, coriolis, gravity, jacobian = (self.model.terms(q, v) if terms is None
                                                   else terms)
        self._last_mass = mass
        return self._step(self._storage, t, q, v, effort, mass, coriolis, gravity, jacobian,
                          pose, self._out, self._out_params, self._out_joints,
                          self._forget_rejects(t), stamp_from_receive)

    def _forget_rejects(self, t: float) -> int:
        """Drop the reject times more than a second before ``t`` s; returns how many are left."""
        reject_times = self._reject_times
        while reject_times and reject_times[0] < t - 1.0:
            reject_times.popleft()
        return len(reject_times)

    def _refused(self, code: int, sample: Sample, t: float) -> None:
        if code == step.STEP_INVALID_SAMPLE:
            return self._invalid(sample)
        if code == step.STEP_NON_FINITE_WRENCH:
            self.observer.reset()
            self._reject(t, SampleRejected("non_finite_output",
                                           "the wrench came out non-finite; observer restarted"))
            return None
        o = self._out
        self._reject(t, self.filter.refusal(int(o["filter_code"][0]),
                                            float(o["filter_time_s"][0]),
                                            self._model_records.rows["regressor"].copy(),
                                            float(o["filter_force"][0])))
        return None

    def _invalid(self, sample: Sample) -> None:
        """A sample refused before any stage saw it: the validator (with the last valid stamp)
        names the reason, else the joint mapping does; the rejection is counted."""
        s = self._pipe[0]
        validator = self.validator
        validator.last_time = float(s["last_valid_s"]) if s["has_valid"] else None
        try:
            validator.check(sample)
            # the numbers are fine (and the stamp now counts as seen, as it did before the
            # joint names were looked at): the joint names are what is wrong
            s["has_valid"] = True
            s["last_valid_s"] = validator.last_time
            self.model.joint_map(sample.names)
            raise SampleRejected("unknown_joint", f"joint state cannot be mapped onto the "
                                 f"model's joints {list(self.model.joint_names)}")
        except SampleRejected as exc:
            self._reject(sample.time, exc)
        return None

    def _reject(self, t: float, exc: SampleRejected) -> None:
        self.rejects.add(exc)
        self._reject_times.append(t)

    def _warm_up(self, t: float) -> None:
        """Learn the nominal interval; build the kinematics once it is known."""
        t_prev = self._t_prev
        dt = 0.0 if t_prev is None else t - t_prev
        if dt > 0:
            self._intervals.append(dt)
        if len(self._intervals) < _KINEMATICS_WARMUP:
            return
        s = self.settings
        st = self._storage
        self.kinematics = AlongKinematics(s["kinematics.window"], s["kinematics.polyorder"],
                                          float(np.median(self._intervals)),
                                          st.params["kinematics"], st.state["kinematics"])
        if self.object_model.code != 0:   # the models in 3-D: the same window, in 3-D
            self._spatial_ring = SPATIAL_RING.many(2 * self.kinematics.n)
            spatial_reset(st.state["spatial"][0], self._spatial_ring)
        self._storage_changed()
