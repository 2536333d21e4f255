"""Typed settings, one registry for the node, the replay and the tuning command.

Every setting is declared once in :data:`SPECS` with its type, default, unit, allowed range and a
description. The ROS node declares its parameters from this table (with descriptors and ranges),
the replay and tuning commands read the same ROS 2 parameter YAML through
``io.parameter_file.load_parameter_file`` (files are the io layer's business), and
:func:`validate_value` refuses a bad value with its name, the value and the allowed range,
whoever supplies it.

Settings are flat, dotted names (``observer.gain``), as ROS 2 parameters are. The YAML file nests
them (``observer: {gain: [...]}``) under ``interaction_estimator:`` or ``/**:`` and then
``ros__parameters:``.
"""
from __future__ import annotations

import difflib
import math
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

NODE_NAME = "interaction_estimator"
STANDARD_GRAVITY = 9.80665  # m/s^2, CGPM 1901 (3rd General Conference on Weights and Measures)


class SettingsError(ValueError):
    """A setting has an unknown name or a value outside what is allowed."""


@dataclass(frozen=True)
class ParamSpec:
    """One setting: dotted name, kind, default, unit, range and meaning.

    kind is one of ``str``, ``float``, ``int``, ``bool``, ``float_array``, ``str_array``.
    ``minimum``/``maximum`` bound numbers (and every element of a float array);
    ``exclusive`` makes both bounds open. ``length`` fixes an array's length (None: any).
    ``read_only``: cannot be changed while the node runs (it needs a restart or a new model).
    """

    name: str
    kind: str
    default: Any
    unit: str
    description: str
    minimum: float | None = None
    maximum: float | None = None
    exclusive: bool = False
    choices: tuple[str, ...] | None = None
    length: int | None = None
    read_only: bool = False

    def range_text(self) -> str:
        """Human-readable allowed values, used in error messages."""
        if self.choices:
            return "one of " + ", ".join(repr(c) for c in self.choices)
        lo = "-inf" if self.minimum is None else f"{self.minimum:g}"
        hi = "+inf" if self.maximum is None else f"{self.maximum:g}"
        brackets = ("(", ")") if self.exclusive else ("[", "]")
        base = {"bool": "true or false", "str": "a string", "str_array": "a list of strings"}.get(
            self.kind, f"{brackets[0]}{lo}, {hi}{brackets[1]}"
        )
        if self.kind == "float_array":
            count = f"{self.length} numbers" if self.length else "a list of numbers"
            return f"{count}, each in {brackets[0]}{lo}, {hi}{brackets[1]}"
        return base


def _f(name, default, unit, description, lo=None, hi=None, exclusive=False, read_only=False):
    return ParamSpec(name, "float", float(default), unit, description, lo, hi, exclusive,
                     read_only=read_only)


def _fa(name, default, unit, description, lo=None, hi=None, length=None, read_only=False):
    return ParamSpec(name, "float_array", [float(x) for x in default], unit, description, lo, hi,
                     length=length, read_only=read_only)


def _s(name, default, description, choices=None, read_only=False):
    return ParamSpec(name, "str", default, "", description, choices=choices, read_only=read_only)


def _i(name, default, unit, description, lo=None, hi=None, read_only=False):
    return ParamSpec(name, "int", int(default), unit, description, lo, hi, read_only=read_only)


def _b(name, default, description, read_only=False):
    return ParamSpec(name, "bool", bool(default), "", description, read_only=read_only)


PER_JOINT = (
    "Per joint, in the order of `joint_names` (or of the model's joints when that list is empty);"
    " an empty list means zero for every joint, a single number applies to every joint."
)

SPECS: tuple[ParamSpec, ...] = (
    # --- robot and contact ----------------------------------------------------------------
    _s("contact_frame", "tool_tip",
       "URDF link or frame where the robot touches the object.", read_only=True),
    _s("effort_side", "link",
       "Where efforts are measured: 'link' (joint torque sensors, no friction removed) or 'motor'"
       " (efforts from motor currents: the friction model is subtracted).",
       choices=("link", "motor")),
    _f("gravity", STANDARD_GRAVITY, "m/s^2",
       "Magnitude of gravity along -z of the world (URDF root) frame.", 0.0, 20.0,
       read_only=True),
    _s("robot_description_file", "",
       "Path to a URDF file; empty: take the URDF from the robot_description topic.",
       read_only=True),
    ParamSpec("joint_names", "str_array", [], "",
              "Order of the per-joint lists (bias, friction, observer gain); empty: the model's"
              " joint order.", read_only=True),
    # --- manipulation direction -----------------------------------------------------------
    _s("direction.mode", "world",
       "Manipulation direction: 'world' (fixed vector in the world frame), 'contact' (fixed in"
       " the contact frame) or 'estimated' (from the contact point's motion).",
       choices=("world", "contact", "estimated")),
    _fa("direction.vector", [1.0, 0.0, 0.0], "",
        "Manipulation direction for 'world' and 'contact' modes; normalized on load; zero is"
        " refused.", length=3),
    _f("direction.window", 0.5, "s",
       "Window over which the direction is estimated from the contact point's motion.",
       0.01, 60.0),
    _f("direction.hysteresis", 10.0, "deg",
       "The estimated direction changes only when the motion turns by more than this angle.",
       0.0, 90.0),
    _f("direction.min_travel", 0.01, "m",
       "Travel within the window below which the estimated direction is kept as it is.",
       0.0, 10.0),
    # --- momentum observer ----------------------------------------------------------------
    _s("observer.form", "kalman",
       "'kalman': Kalman-filter form with the external torque as a disturbance state (less noise"
       " for the same bandwidth, no lag on ramps); 'first_order': the classic first-order"
       " residual r' = K_O (tau_ext - r).", choices=("kalman", "first_order")),
    _fa("observer.gain", [80.0], "1/s",
        "Observer bandwidth: K_O of the first-order form, or the pole radius of the Kalman form. "
        + PER_JOINT + " Higher: faster response (lag about 1/K_O s in the first-order form),"
        " more noise.", 0.1, 5000.0),
    _f("observer.velocity_noise", 0.003, "rad/s",
       "Standard deviation of the measured joint velocities (Kalman form).", 1e-9, 100.0),
    _f("observer.effort_noise", 0.1, "N·m",
       "Standard deviation of the measured efforts (Kalman form).", 0.0, 1e4),
    _f("observer.max_gap", 0.05, "s",
       "A gap between samples longer than this restarts the observer.", 1e-4, 10.0),
    # --- torque bias ----------------------------------------------------------------------
    _fa("bias.initial", [], "N·m", "Torque-sensor bias to start from. " + PER_JOINT,
        -1000.0, 1000.0),
    _b("bias.learn", True, "Learn the bias while the robot moves freely (no contact)."),
    _f("bias.time_constant", 0.2, "s", "Time constant of bias learning in free motion.",
       1e-3, 3600.0),
    _f("bias.max_rate", 1.0, "N·m/s",
       "Largest change of the bias estimate per second in free motion (a sensor's drift; the"
       " start-up phase is not limited): a contact force rising faster shows in the residual"
       " instead of being learned as bias.",
       0.0, 1e4),
    _f("bias.limit", 10.0, "N·m", "Largest magnitude the bias estimate may take, per joint.",
       0.0, 1e4),
    _f("bias.startup", 1.0, "s",
       "After start or reset the robot is taken to move freely for this long while the bias is"
       " learned; contact is not detected meanwhile.", 0.0, 60.0),
    # --- friction (motor-side efforts only) ------------------------------------------------
    _fa("friction.viscous", [], "N·m·s/rad", "Viscous friction coefficient f_v. " + PER_JOINT,
        0.0, 1e4),
    _fa("friction.coulomb", [], "N·m", "Coulomb friction level f_c. " + PER_JOINT, 0.0, 1e4),
    _f("friction.smoothing_velocity", 0.01, "rad/s",
       "Velocity eps of the smooth sign tanh(v/eps) in the Coulomb term.", 1e-6, 10.0),
    # --- contact monitor -------------------------------------------------------------------
    _f("contact.enter_level", 6.0, "",
       "Contact begins when the residual's RMS over joints, in units of its free-motion noise,"
       " exceeds this level.", 1.0, 1e4),
    _f("contact.exit_level", 3.0, "",
       "Contact ends when that normalized residual falls below this level (hysteresis).",
       0.5, 1e4),
    _f("contact.hold_time", 0.02, "s",
       "The level must stay above contact.enter_level this long before contact begins.",
       0.0, 10.0),
    _f("contact.evidence", 0.5, "s",
       "Contact also begins, sooner, when the time integral of level^2 - exit_level^2 (a"
       " CUSUM of the residual's evidence) exceeds this: about 20 ms at level 6, 80 ms at level"
       " 4. 0: off (the level rule alone).", 0.0, 1e6),
    _f("contact.release_time", 1.0, "s",
       "The level must stay below contact.exit_level this long before contact ends (a held"
       " object's force passes through zero briefly without ending the contact).", 0.0, 60.0),
    _f("contact.forget_after", 2.0, "s",
       "A contact regained within this time after it ended continues the previous one (same"
       " object, position kept); later, it starts anew (position from zero, estimates made"
       " uncertain again).", 0.0, 3600.0),
    _f("contact.noise_floor", 0.05, "N·m",
       "Smallest residual noise level assumed per joint.", 1e-6, 1e3),
    _f("contact.noise_time_constant", 2.0, "s",
       "Time constant over which the residual's free-motion noise level is learned (from the"
       " mean square of each 10 ms of quiet samples).",
       1e-3, 3600.0),
    # --- wrench ----------------------------------------------------------------------------
    _s("wrench.mode", "force",
       "'force': 3-D force at a point contact; 'wrench': force and torque.",
       choices=("force", "wrench")),
    _f("wrench.damping", 1e-3, "m (force mode), 1 (wrench mode)",
       "Damping lambda of the least-squares inverse (J J^T + lambda^2 I)^-1 J.", 0.0, 10.0),
    _f("wrench.condition_limit", 200.0, "",
       "Condition number of the contact Jacobian above which the wrench is flagged.",
       1.0, 1e9),
    # --- kinematics along the direction ---------------------------------------------------
    _f("kinematics.window", 0.06, "s",
       "Savitzky-Golay window of the acceleration differentiator; its lag is half of it.",
       1e-3, 5.0),
    _i("kinematics.polyorder", 2, "",
       "Polynomial order of the Savitzky-Golay fit.", 1, 5),
    # --- environment filter (recursive Bayesian least squares on block means) -------------
    _fa("filter.initial_mean", [0.0, 0.0, 0.0, 0.0], "kg, N·s/m, N/m, N",
        "Prior of [mass, damping, stiffness, static_force]. With filter.nonnegative the first"
        " three must not be negative.", -1e6, 1e6, length=4),
    _fa("filter.initial_std", [50.0, 500.0, 5000.0, 200.0], "kg, N·s/m, N/m, N",
        "Prior standard deviation of [mass, damping, stiffness, static_force]: wide enough for"
        " any object the robot may meet; what the motion does not tell stays at this prior.",
        1e-9, 1e9, length=4),
    _f("filter.update_interval", 0.1, "s",
       "The measurement rows are averaged over blocks this long before the estimate uses them:"
       " the force's error is coloured over a few tens of milliseconds, the means of longer"
       " blocks are nearly independent, so the noise level is learned honestly at any sample"
       " rate. 0: every row is a block.", 0.0, 10.0),
    _f("filter.measurement_std", 2.0, "N",
       "Noise level of a block's mean force to start from; learned from the residuals when"
       " filter.learn_noise is true (this value then weighs as a few blocks).", 1e-6, 1e6),
    _b("filter.learn_noise", True,
       "Learn the noise level from the residuals of the fit (else filter.measurement_std is"
       " used as it is)."),
    _f("filter.memory", 0.0, "s",
       "Forgetting time of the data behind the estimate; 0: nothing is forgotten (a stationary"
       " object; changes are detected by filter.change_threshold instead).", 0.0, 1e6),
    _f("filter.change_threshold", 20.0, "",
       "CUSUM threshold on the normalized innovation squared of the blocks above which the"
       " object is taken to have changed (the estimate is then made again from the blocks"
       " since the change).", 0.0, 1e9, exclusive=True),
    _f("filter.change_drift", 2.0, "",
       "CUSUM drift subtracted from each block's NIS before accumulating (1 is the NIS mean).",
       0.0, 1e6),
    _f("filter.history_time", 5.0, "s",
       "Blocks kept for estimating again after a change.", 0.1, 600.0),
    _f("filter.nis_time", 5.0, "s",
       "Time over which the blocks' normalized innovation squared (NIS) is averaged and"
       " compared with its two-sided 95 % chi-square interval.", 0.1, 3600.0),
    _f("filter.excited_fraction", 0.25, "",
       "A parameter is excited when its standard deviation is below this share of its scale"
       " (the larger of its value and the value whose force would be 5 % of the RMS force)"
       " and below half its prior standard deviation.", 1e-6, 10.0),
    _f("filter.converged_fraction", 0.03, "",
       "A parameter has converged when its standard deviation is below this share of its"
       " scale (see filter.excited_fraction): a verdict on what its uncertainty does to the"
       " force, the same for every object.", 1e-6, 10.0),
    _b("filter.nonnegative", True, "Keep mass, damping and stiffness non-negative."),
    _b("filter.correlation_correction", True,
       "Standard deviations consistent with correlated residuals (a Newey-West sandwich over"
       " filter.correlation_time); false: from the white-noise covariance alone."),
    _f("filter.model_error", 0.02, "",
       "Systematic error of the estimated force (the observer's, the wrench map's and the"
       " kinematics' own), as a share of a parameter's scale: added to its standard deviation,"
       " since no amount of data removes it.", 0.0, 1.0),
    _f("filter.correlation_time", 1.0, "s",
       "Time over which the residuals of the blocks are taken to be correlated.", 0.0, 60.0),
    # --- object model ----------------------------------------------------------------------
    _s("environment.model", "along_direction",
       "What the object is: 'along_direction' (mass, damping, stiffness and static force along"
       " the direction u of direction.*), 'cartesian' (3x3 symmetric positive semidefinite mass,"
       " damping and stiffness matrices and a static force vector, world frame; needs"
       " wrench.mode force and direction.mode world), 'revolute' (a hinge: door, lid, crank;"
       " axis, a point on it and the grasp radius from the contact point's path, the four"
       " parameters along the arc as felt at the grasp) or 'prismatic' (a slider: drawer; the"
       " axis from the path, the four parameters along it).",
       choices=("along_direction", "cartesian", "revolute", "prismatic"), read_only=True),
    _fa("cartesian.initial_diagonal", [0.0, 0.0, 0.0], "kg, N·s/m, N/m",
        "Prior mean of the diagonal entries of the mass, damping and stiffness matrices"
        " (environment.model cartesian); off-diagonal entries have prior mean 0.", 0.0, 1e6,
        length=3),
    _fa("cartesian.initial_static_force", [0.0, 0.0, 0.0], "N",
        "Prior mean of the static force vector, world x, y, z (environment.model cartesian).",
        -1e6, 1e6, length=3),
    _fa("cartesian.initial_std", [50.0, 500.0, 5000.0, 200.0], "kg, N·s/m, N/m, N",
        "Prior standard deviation of every entry of the mass, damping and stiffness matrices"
        " and of each static force component (environment.model cartesian).", 1e-9, 1e9,
        length=4),
    _f("mechanism.min_travel", 0.02, "m",
       "Path of the contact point (farthest distance from where the contact began) below which"
       " a mechanism's geometry is not fitted and its parameters stay at their prior"
       " (environment.model revolute or prismatic).", 1e-4, 10.0),
    _f("mechanism.min_arc", 20.0, "deg",
       "Arc the contact point must have swept about the fitted hinge axis before the axis and"
       " radius count as converged (environment.model revolute).", 0.5, 360.0),
    _f("mechanism.converged_travel", 0.05, "m",
       "Travel along the fitted axis before it counts as converged (environment.model"
       " prismatic).", 1e-4, 10.0),
    _f("mechanism.path_tolerance", 0.005, "m",
       "RMS distance of the contact point's path from the fitted circle (revolute) or line"
       " (prismatic) above which the path is reported as not fitting the mechanism and its"
       " parameters are held at their prior.", 1e-6, 1.0),
    _f("mechanism.max_radius", 5.0, "m",
       "Largest grasp radius taken for a hinge: a path straighter than this circle is reported"
       " as straight (a slider, or a hinge not located yet), not as a hinge.", 0.01, 1000.0),
    # --- health ---------------------------------------------------------------------------
    _f("health.max_latency", 0.01, "s",
       "Processing latency above which the status warns.", 0.0, 10.0),
    _f("health.min_rate", 100.0, "Hz",
       "Input rate below which the status warns.", 0.0, 1e6),
    _f("health.stale_after", 0.5, "s",
       "Estimates older than this (no contact, no input) are STALE.", 0.0, 3600.0),
    # --- moving base ----------------------------------------------------------------------
    _s("base.source", "joints",
       "Where a mobile base's motion comes from: 'joints' (the URDF writes the base as joints"
       " carried in joint_states, or the robot is fixed) or 'odometry' (the URDF's root link is"
       " the base, on a free-flyer joint: its pose and twist from the odometry input, roll,"
       " pitch and angular rate from the imu input; world frame = the odometry's frame_id).",
       choices=("joints", "odometry"), read_only=True),
    _b("base.imu", True,
       "With base.source odometry: roll, pitch and angular rate of the base from the imu input;"
       " false: from the odometry alone.", read_only=True),
    _f("base.max_age", 0.1, "s",
       "With base.source odometry: the base state at a joint state's stamp is interpolated"
       " between the odometry (and IMU) messages before and after it; a joint state with either"
       " farther than this is rejected (stale_odometry, missing_imu).", 0.001, 10.0,
       exclusive=False),
    _f("base.velocity_noise", 0.01, "m/s",
       "Noise of the odometry's linear velocity, used only to judge whether its rate suffices"
       " for the base's motion when its twist covariance states none.", 0.0, 10.0),
    _f("base.rate_noise", 0.005, "rad/s",
       "Noise of the base's angular rate (IMU, or odometry without IMU), for the same check.",
       0.0, 10.0),
    # --- node inputs and outputs (used by the node only) ------------------------------------
    _b("input.separate_efforts", False,
       "Take efforts from the joint_efforts topic, matched to joint_states by stamp.",
       read_only=True),
    _f("input.stamp_tolerance", 0.0005, "s",
       "Largest stamp difference for matching an effort message to a joint state.", 0.0, 1.0),
    _i("input.queue_depth", 200, "messages", "Subscription queue depth.", 1, 100000,
       read_only=True),
    _s("input.reliability", "best_effort", "Subscription reliability QoS.",
       choices=("best_effort", "reliable"), read_only=True),
    _f("input.expected_rate", 0.0, "Hz",
       "Expected joint-state rate; 0: not checked.", 0.0, 1e6),
    _f("output.status_rate", 50.0, "Hz",
       "Rate of ~/status; 0: one per processed sample.", 0.0, 1e5),
    _f("output.diagnostics_rate", 1.0, "Hz", "Rate of /diagnostics.", 0.01, 100.0),
    _f("output.marker_force_scale", 0.01, "m/N",
       "Length of the force arrow on ~/markers per newton of force.", 1e-5, 1.0),
    _s("output.frame_id", "",
       "frame_id of the published wrench; empty: the world frame (the URDF root link, or with"
       " base.source odometry the odometry's frame_id)."),
)

SPEC_BY_NAME: dict[str, ParamSpec] = {s.name: s for s in SPECS}

# Settings of earlier versions, with what replaces them (a file that still sets one is refused
# with this message rather than read with a changed meaning).
RETIRED: dict[str, str] = {
    "filter.process_std": "a stationary object is no longer forgotten: changes are detected"
    " (filter.change_threshold); for an object that drifts, set filter.memory (s)",
    "filter.measurement_std_floor": "the noise level is learned from the fit's residuals"
    " (filter.learn_noise)",
    "filter.noise_adaptation": "the noise level is learned from the fit's residuals"
    " (filter.learn_noise)",
    "filter.fading_factor": "the noise level is learned from the fit's residuals"
    " (filter.learn_noise); forgetting is filter.memory, in seconds",
    "filter.matching_window": "windows are in seconds now; the noise level is learned from the"
    " fit's residuals (filter.learn_noise)",
    "filter.process_adaptation": "a stationary object is no longer forgotten: see"
    " filter.memory (s) and filter.change_threshold",
    "filter.nis_window": "windows are in seconds now: use filter.nis_time (s)",
    "filter.change_inflation": "after a change the estimate is made again from the blocks since"
    " the change (filter.history_time, s)",
    "filter.excitation_window": "excitation is judged over the data the estimate rests on; see"
    " filter.excited_fraction",
    "filter.excitation_min": "excitation is judged by what a parameter's uncertainty does to the"
    " force, not by thresholds in m/s: use filter.excited_fraction",
    "filter.converged_std": "convergence is judged by what a parameter's uncertainty does to the"
    " force, not by thresholds in kg or N/m: use filter.converged_fraction",
    "filter.converged_rel_std": "use filter.converged_fraction (a share of the parameter's"
    " scale)",
}


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _check_bounds(spec: ParamSpec, x: float, where: str) -> None:
    if not math.isfinite(x):
        raise SettingsError(f"{where}: {x!r} is not finite; expected {spec.range_text()}")
    lo, hi = spec.minimum, spec.maximum
    if spec.exclusive:
        bad = (lo is not None and x <= lo) or (hi is not None and x >= hi)
    else:
        bad = (lo is not None and x < lo) or (hi is not None and x > hi)
    if bad:
        unit = f" {spec.unit}" if spec.unit else ""
        raise SettingsError(
            f"{where}: {x!r}{unit} is out of range; expected {spec.range_text()}")


def validate_value(name: str, value: Any) -> Any:
    """Check one setting and return it normalized (floats as float, arrays as lists).

    Raises SettingsError naming the setting, the bad value and what is expected.
    """
    spec = SPEC_BY_NAME.get(name)
    if spec is None:
        raise SettingsError(unknown_name_message(name))
    kind = spec.kind
    if kind == "str":
        if not isinstance(value, str):
            raise SettingsError(f"{name}: {value!r} is not a string; expected {spec.range_text()}")
        if spec.choices and value not in spec.choices:
            raise SettingsError(f"{name}: {value!r} is not allowed; expected {spec.range_text()}")
        return value
    if kind == "bool":
        if not isinstance(value, bool):
            raise SettingsError(f"{name}: {value!r} is not true or false")
        return value
    if kind == "int":
        if not (isinstance(value, int) and not isinstance(value, bool)):
            raise SettingsError(f"{name}: {value!r} is not a whole number; expected "
                                f"{spec.range_text()}")
        _check_bounds(spec, float(value), name)
        return int(value)
    if kind == "float":
        if not _is_number(value):
            raise SettingsError(f"{name}: {value!r} is not a number; expected {spec.range_text()}")
        _check_bounds(spec, float(value), name)
        return float(value)
    if kind == "float_array":
        if _is_number(value):
            value = [value]
        if not isinstance(value, (list, tuple)) or not all(_is_number(v) for v in value):
            raise SettingsError(f"{name}: {value!r} is not a list of numbers; expected "
                                f"{spec.range_text()}")
        if spec.length is not None and len(value) != spec.length:
            raise SettingsError(f"{name}: {list(value)!r} has {len(value)} numbers; expected "
                                f"{spec.range_text()}")
        for i, v in enumerate(value):
            _check_bounds(spec, float(v), f"{name}[{i}]")
        out = [float(v) for v in value]
        if name == "direction.vector" and math.sqrt(sum(v * v for v in out)) < 1e-9:
            raise SettingsError(f"{name}: {out!r} has zero length; expected a non-zero vector")
        return out
    if kind == "str_array":
        if not isinstance(value, (list, tuple)) or not all(isinstance(v, str) for v in value):
            raise SettingsError(f"{name}: {value!r} is not a list of strings")
        return list(value)
    raise AssertionError(f"unknown kind {kind}")  # a defect in SPECS, not user input


def unknown_name_message(name: str) -> str:
    if name in RETIRED:
        return f"setting {name!r} is no longer used: {RETIRED[name]}"
    close = difflib.get_close_matches(name, SPEC_BY_NAME, n=3)
    hint = f"; did you mean {', '.join(close)}?" if close else ""
    return f"unknown setting {name!r}{hint} (see config/default.yaml for the full list)"


class Settings(Mapping[str, Any]):
    """An immutable, validated set of all settings, read by dotted name: ``s["observer.gain"]``.

    Cross-setting rules (exit level below enter level) are checked here too.
    """

    def __init__(self, values: Mapping[str, Any] | None = None):
        merged = {s.name: _copy(s.default) for s in SPECS}
        for name, value in (values or {}).items():
            merged[name] = validate_value(name, value)
        if merged["contact.exit_level"] >= merged["contact.enter_level"]:
            raise SettingsError(
                f"contact.exit_level: {merged['contact.exit_level']!r} must be below "
                f"contact.enter_level ({merged['contact.enter_level']!r})")
        if merged["environment.model"] == "cartesian":
            if merged["wrench.mode"] != "force":
                raise SettingsError(
                    f"wrench.mode: {merged['wrench.mode']!r} contradicts environment.model "
                    "'cartesian': that model explains the 3-D force at a point contact and has"
                    " no place for a torque; expected wrench.mode 'force'")
            if merged["direction.mode"] != "world":
                raise SettingsError(
                    f"direction.mode: {merged['direction.mode']!r} contradicts "
                    "environment.model 'cartesian': that model has no single direction (it"
                    " covers every direction of the world frame); expected direction.mode"
                    " 'world' (its vector then only sets the direction of the *_along"
                    " columns)")
        self._values = merged

    def __getitem__(self, name: str) -> Any:
        try:
            return _copy(self._values[name])
        except KeyError:
            raise SettingsError(unknown_name_message(name)) from None

    def __iter__(self):
        return iter(self._values)

    def __len__(self) -> int:
        return len(self._values)

    def replace(self, changes: Mapping[str, Any]) -> Settings:
        """A new Settings with ``changes`` applied (each validated)."""
        return Settings({**self._values, **changes})

    def to_flat(self) -> dict[str, Any]:
        return {k: _copy(v) for k, v in self._values.items()}

    def __repr__(self) -> str:
        changed = {k: v for k, v in self._values.items() if v != SPEC_BY_NAME[k].default}
        return f"Settings({changed!r})"


def _copy(value: Any) -> Any:
    return list(value) if isinstance(value, list) else value


def flatten(tree: Mapping[str, Any], prefix: str = "") -> dict[str, Any]:
    """Nested YAML mapping -> dotted names, as ROS 2 does for parameter files."""
    flat: dict[str, Any] = {}
    for key, value in tree.items():
        name = f"{prefix}{key}"
        if isinstance(value, Mapping):
            flat.update(flatten(value, name + "."))
        else:
            flat[name] = value
    return flat


def nest(flat: Mapping[str, Any]) -> dict[str, Any]:
    """Dotted names -> nested mapping (the inverse of :func:`flatten`)."""
    tree: dict[str, Any] = {}
    for name, value in flat.items():
        node = tree
        *parents, leaf = name.split(".")
        for p in parents:
            node = node.setdefault(p, {})
        node[leaf] = value
    return tree


def per_joint(settings: Settings, name: str, model_joints: Iterable[str]) -> list[float]:
    """Resolve a per-joint list setting to one value per model joint (model order).

    Empty: zeros. One value: every joint. Otherwise one value per name of ``joint_names``
    (or per model joint when ``joint_names`` is empty); joints not listed get zero.
    """
    joints = list(model_joints)
    values = settings[name]
    if not values:
        return [0.0] * len(joints)
    if len(values) == 1:
        return [values[0]] * len(joints)
    order = settings["joint_names"] or joints
    if len(values) != len(order):
        raise SettingsError(
            f"{name}: {len(values)} values given; expected 1 or {len(order)} (one per joint of "
            f"{'joint_names' if settings['joint_names'] else 'the model'}: {order})")
    unknown = [j for j in order if j not in joints]
    if unknown:
        raise SettingsError(f"joint_names: {unknown} are not joints of the model; expected "
                            f"names from {joints}")
    by_name = dict(zip(order, values, strict=True))
    return [by_name.get(j, 0.0) for j in joints]
