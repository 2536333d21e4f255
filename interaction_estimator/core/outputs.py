"""The outputs of one sample: one record schema for the Estimate, estimates.csv and the messages.

:data:`SAMPLE` is what the compiled step writes per sample, :data:`PARAMETER` per parameter of
the object model (m of them) and :data:`JOINT` per joint (nv). :func:`columns` turns a block of
them into the named columns of estimates.csv (the contract of DESIGN.md, section 4, with the
parameters' names taken from the object model), and :func:`message_numbers` into the numbers
``~/wrench`` and ``~/environment`` carry: every consumer reads the same fields.
"""
from __future__ import annotations

from collections.abc import Callable, Mapping

import numpy as np

from .health import PHASE_CONTACT, PHASES, STATES
from .mechanism import GEOMETRY_CONVERGED
from .object_models import ObjectModel
from .records import B1, F8, I1, I8, record

# events of a sample
EV_NONE, EV_RESTARTED, EV_BEGIN, EV_END, EV_RESUMED, EV_CHANGE = range(6)
EVENTS = ("", "observer_restarted", "contact_begin", "contact_end", "contact_resumed", "change")
FILTER_NOT_UPDATED = -1   # SAMPLE.filter_code when the filter was not updated at the sample

SAMPLE = record(
    "outputs of one sample",
    ("force", F8, (3,), "N", "force the robot applies to the environment, world frame"),
    ("torque", F8, (3,), "N·m", "torque the robot applies (zero in force mode)"),
    ("direction", F8, (3,), "", "manipulation direction u, unit, world frame"),
    ("force_along", F8, "N", "u . force"),
    ("position_along", F8, "m", "position along u from the contact onset (window centre)"),
    ("velocity_along", F8, "m/s", "velocity of the contact point along u (now)"),
    ("acceleration_along", F8, "m/s^2", "acceleration along u (window centre)"),
    ("nis", F8, "", "normalized innovation squared of the last filter update"),
    ("nis_average", F8, "", "its mean over the NIS window"),
    ("nis_lower", F8, "", "lower bound of that mean (95 %)"),
    ("nis_upper", F8, "", "upper bound"),
    ("measurement_std", F8, "N", "the filter's measurement standard deviation"),
    ("contact_level", F8, "", "residual level in units of its free-motion noise"),
    ("jacobian_condition", F8, "", "condition number of the contact Jacobian rows used"),
    ("rate_hz", F8, "Hz", "input rate from the stamps"),
    ("kinematics_lag_s", F8, "s", "lag of the window centre behind the sample"),
    ("bias_age_s", F8, "s", "time since the bias was last learned (inf: never)"),
    ("phase", I1, "", "health.PHASE_*"),
    ("event", I1, "", "EV_*"),
    ("all_converged", B1, "", "in contact and every parameter converged"),
    ("filter_samples", I8, "", "filter updates since its last reset"),
    ("startup_remaining_s", F8, "s", "bias-learning time left"),
    ("since_contact_end_s", F8, "s", "time since the last contact ended (inf: never)"),
    ("change", I8, "", "environment.CHANGE_* bits of this sample's filter update"),
    ("change_g", F8, "", "the CUSUM value of a CUSUM change"),
    ("observer_restarts", I8, "", "observer restarts so far"),
    ("filter_code", I1, "", "FILTER_NOT_UPDATED, environment.ADDED, UPDATED or a refusal code"),
    ("filter_time_s", F8, "s", "time of the filter's measurement row (window centre)"),
    ("filter_force", F8, "N", "force of that row"),
    ("regained", B1, "", "a contact began after one had ended: the covariance was inflated"),
    ("level", I1, "", "health level: OK 0, WARN 1, ERROR 2, STALE 3"),
    ("state", I1, "", "health.STATE_* (word: health.STATES)"),
    ("findings", I8, "", "health.FINDING_* bits"),
    # the mechanism's geometry (revolute, prismatic)
    ("geometry", I1, "", "mechanism.GEOMETRY_* (word: mechanism.GEOMETRY_WORDS)"),
    ("axis", F8, (3,), "", "hinge or slider axis, unit, world frame (opening sense positive)"),
    ("axis_point", F8, (3,), "m", "a point on the hinge axis, world frame"),
    ("radius", F8, "m", "grasp radius about the hinge axis"),
    ("angle", F8, "rad", "hinge angle of the contact point now, from the contact onset"),
    ("swept_arc", F8, "rad", "arc the path has swept about the hinge axis"),
    ("travel", F8, "m", "farthest distance of the path from the contact onset"),
    ("path_rms", F8, "m", "RMS distance of the path from the fitted circle or line"),
    ("radius_std", F8, "m", "standard deviation of the radius"),
    ("axis_std", F8, "rad", "standard deviation of the axis direction"),
)
PARAMETER = record(
    "outputs of one sample, per parameter of the object model",
    ("value", F8, "(parameter unit)", "estimate (the prior before the first update)"),
    ("std", F8, "(parameter unit)", "standard deviation"),
    ("excited", B1, "", "excited by the motion"),
    ("converged", B1, "", "converged (in contact only)"),
)
JOINT = record(
    "outputs of one sample, per joint",
    ("external_torque", F8, "N·m or N", "the observer's residual with the bias removed"),
    ("bias", F8, "N·m or N", "the bias b"),
    ("raw_residual", F8, "N·m or N", "the observer's output before the bias"),
)


_NO_TORQUE: np.ndarray = np.zeros(3)   # the torque of force mode (read-only, shared)
_NO_TORQUE.setflags(write=False)


class Estimate:
    """Everything the pipeline knows after one sample. SI units; world frame = URDF root.

    A read-only view of the sample's output records (copied when it was made, so it stays valid
    after the next sample); each field is read from them when asked for, so an Estimate costs
    little to make and only the fields a caller reads cost anything.

    force (3,) N and torque (3,) N·m: what the robot applies to the environment at the contact
    frame (torque zero in force mode). direction (3,): unit u. force_along N,
    position_along m (from contact onset), velocity_along m/s, acceleration_along m/s^2 (at
    ``kinematics_lag`` s before ``time``). parameters (m,) in the object model's order and units
    (default [kg, N·s/m, N/m, N]) and their standard deviations; per-parameter excited/converged
    flags; converged: all converged. external_torque (nv,) N·m, bias (nv,) N·m in model joint
    order. parameter_names: the object model's. message and event: the verdict and the sample's
    event in words.
    """

    __slots__ = ("time", "stamp_from_receive", "rejected", "parameter_names", "_row",
                 "_parameters", "_joints", "_words", "_full_wrench", "_text", "model_name")

    def __init__(self, time: float, row: np.ndarray, parameters: np.ndarray, joints: np.ndarray,
                 stamp_from_receive: bool, rejected: int, parameter_names: tuple[str, ...],
                 full_wrench: bool, words: Callable[[Estimate], tuple[str, str]],
                 model_name: str = "along_direction"):
        self.time, self.stamp_from_receive, self.rejected = time, stamp_from_receive, rejected
        self.parameter_names = parameter_names
        self.model_name = model_name   # environment.model
        self._row, self._parameters, self._joints = row, parameters, joints
        self._full_wrench, self._words = full_wrench, words
        self._text: tuple[str, str] | None = None

    def _field(self, name: str) -> float:
        # a field of the (1,) array, then its element: ~0.2 us, where a field of the record
        # scalar costs ~1 us (numpy, measured here)
        return float(self._row[name][0])

    force = property(lambda self: self._row["force"][0])
    torque = property(lambda self: self._row["torque"][0] if self._full_wrench else _NO_TORQUE)
    direction = property(lambda self: self._row["direction"][0])
    force_along = property(lambda self: self._field("force_along"))
    position_along = property(lambda self: self._field("position_along"))
    velocity_along = property(lambda self: self._field("velocity_along"))
    acceleration_along = property(lambda self: self._field("acceleration_along"))
    parameters = property(lambda self: self._parameters["value"])
    parameter_std = property(lambda self: self._parameters["std"])
    excited = property(lambda self: self._parameters["excited"])
    parameter_converged = property(lambda self: self._parameters["converged"])
    converged = property(lambda self: bool(self._row["all_converged"][0]))
    in_contact = property(lambda self: int(self._row["phase"][0]) == PHASE_CONTACT)
    phase = property(lambda self: PHASES[int(self._row["phase"][0])])
    level = property(lambda self: int(self._row["level"][0]))
    state = property(lambda self: STATES[int(self._row["state"][0])])
    nis = property(lambda self: self._field("nis"))
    nis_average = property(lambda self: self._field("nis_average"))
    nis_bounds = property(lambda self: (self._field("nis_lower"), self._field("nis_upper")))
    measurement_std = property(lambda self: self._field("measurement_std"))
    external_torque = property(lambda self: self._joints["external_torque"])
    bias = property(lambda self: self._joints["bias"])
    bias_age = property(lambda self: self._field("bias_age_s"))
    contact_level = property(lambda self: self._field("contact_level"))
    jacobian_condition = property(lambda self: self._field("jacobian_condition"))
    observer_restarts = property(lambda self: int(self._row["observer_restarts"][0]))
    rate_hz = property(lambda self: self._field("rate_hz"))
    kinematics_lag = property(lambda self: self._field("kinematics_lag_s"))
    # a mechanism's geometry (zeros for the models without one)
    geometry = property(lambda self: int(self._row["geometry"][0]))
    geometry_converged = property(lambda self: int(self._row["geometry"][0])
                                  == GEOMETRY_CONVERGED)
    axis = property(lambda self: self._row["axis"][0])
    axis_point = property(lambda self: self._row["axis_point"][0])
    radius = property(lambda self: self._field("radius"))
    angle = property(lambda self: self._field("angle"))
    swept_arc = property(lambda self: self._field("swept_arc"))
    travel = property(lambda self: self._field("travel"))
    path_rms = property(lambda self: self._field("path_rms"))
    radius_std = property(lambda self: self._field("radius_std"))
    axis_std = property(lambda self: self._field("axis_std"))

    @property
    def record(self) -> np.ndarray:
        """The sample's outputs: a read-only (1,) array of :data:`SAMPLE`."""
        return self._row

    @property
    def message(self) -> str:
        """The health verdict in words."""
        if self._text is None:
            self._text = self._words(self)
        return self._text[0]

    @property
    def event(self) -> str:
        """What happened at this sample, in words ("" when nothing)."""
        if self._text is None:
            self._text = self._words(self)
        return self._text[1]

    def __repr__(self) -> str:
        return (f"Estimate(time={self.time!r}, state={self.state!r}, level={self.level}, "
                f"force={self.force.tolist()!r}, parameters={self.parameters.tolist()!r})")


class EstimateBlock:
    """The estimates of the accepted samples of one block, as columns (k rows): ``time`` (k,) s,
    ``rows`` (k,) :data:`SAMPLE` records and ``parameters_out`` (k, m) :data:`PARAMETER`
    records; the properties below read them as :class:`Estimate`'s fields do."""

    __slots__ = ("time", "rows", "parameters_out", "model")

    def __init__(self, time: np.ndarray, rows: np.ndarray, parameters_out: np.ndarray,
                 model: ObjectModel):
        self.time, self.rows, self.parameters_out, self.model = (time, rows, parameters_out,
                                                                 model)

    def __len__(self) -> int:
        return len(self.time)

    force = property(lambda self: self.rows["force"])
    direction = property(lambda self: self.rows["direction"])
    force_along = property(lambda self: self.rows["force_along"])
    position_along = property(lambda self: self.rows["position_along"])
    velocity_along = property(lambda self: self.rows["velocity_along"])
    acceleration_along = property(lambda self: self.rows["acceleration_along"])
    parameters = property(lambda self: self.parameters_out["value"])
    parameter_std = property(lambda self: self.parameters_out["std"])
    excited = property(lambda self: self.parameters_out["excited"])
    parameter_converged = property(lambda self: self.parameters_out["converged"])
    converged = property(lambda self: self.rows["all_converged"])
    nis = property(lambda self: self.rows["nis"])
    nis_average = property(lambda self: self.rows["nis_average"])
    nis_bounds = property(lambda self: (self.rows["nis_lower"], self.rows["nis_upper"]))
    measurement_std = property(lambda self: self.rows["measurement_std"])
    contact_level = property(lambda self: self.rows["contact_level"])
    jacobian_condition = property(lambda self: self.rows["jacobian_condition"])
    kinematics_lag = property(lambda self: self.rows["kinematics_lag_s"])
    bias_age = property(lambda self: self.rows["bias_age_s"])
    in_contact = property(lambda self: self.rows["phase"] == PHASE_CONTACT)
    level = property(lambda self: self.rows["level"])
    geometry = property(lambda self: self.rows["geometry"])
    geometry_converged = property(lambda self: self.rows["geometry"] == GEOMETRY_CONVERGED)
    axis = property(lambda self: self.rows["axis"])
    axis_point = property(lambda self: self.rows["axis_point"])
    radius = property(lambda self: self.rows["radius"])
    angle = property(lambda self: self.rows["angle"])
    swept_arc = property(lambda self: self.rows["swept_arc"])
    travel = property(lambda self: self.rows["travel"])
    path_rms = property(lambda self: self.rows["path_rms"])
    radius_std = property(lambda self: self.rows["radius_std"])
    axis_std = property(lambda self: self.rows["axis_std"])

    @property
    def state(self) -> np.ndarray:
        """(k,) the state words."""
        return np.array(STATES, dtype=object)[self.rows["state"]]


def column_names(model: ObjectModel) -> list[str]:
    """The columns of estimates.csv, in order, for ``model``."""
    names = list(model.parameter_names)
    return (["time", "force_x", "force_y", "force_z", "force_along", "position_along",
             "velocity_along", "acceleration_along"] + names + [f"{p}_std" for p in names]
            + ["converged", "in_contact", "level", "state", "direction_x", "direction_y",
               "direction_z", "nis", "nis_average", "nis_lower", "nis_upper",
               "measurement_std"]
            + [f"{p}_converged" for p in names] + [f"{p}_excited" for p in names]
            + ["contact_level", "jacobian_condition", "bias_age", "kinematics_lag"])


def columns(time: np.ndarray, rows: np.ndarray, parameters_out: np.ndarray,
            model: ObjectModel) -> dict[str, np.ndarray]:
    """estimates.csv's columns (see :func:`column_names`) from a block's records: floats for
    numbers, int8 0/1 for flags, int8 levels and the state words (object array)."""
    names = model.parameter_names
    out: dict[str, np.ndarray] = {"time": np.asarray(time, dtype=float)}
    for i, axis in enumerate("xyz"):
        out[f"force_{axis}"] = rows["force"][:, i]
    for name in ("force_along", "position_along", "velocity_along", "acceleration_along"):
        out[name] = rows[name]
    for i, p in enumerate(names):
        out[p] = parameters_out["value"][:, i]
    for i, p in enumerate(names):
        out[f"{p}_std"] = parameters_out["std"][:, i]
    out["converged"] = rows["all_converged"].astype(np.int8)
    out["in_contact"] = (rows["phase"] == PHASE_CONTACT).astype(np.int8)
    out["level"] = rows["level"]
    out["state"] = np.array(STATES, dtype=object)[rows["state"]]
    for i, axis in enumerate("xyz"):
        out[f"direction_{axis}"] = rows["direction"][:, i]
    for name in ("nis", "nis_average", "nis_lower", "nis_upper", "measurement_std"):
        out[name] = rows[name]
    for i, p in enumerate(names):
        out[f"{p}_converged"] = parameters_out["converged"][:, i].astype(np.int8)
    for i, p in enumerate(names):
        out[f"{p}_excited"] = parameters_out["excited"][:, i].astype(np.int8)
    out["contact_level"] = rows["contact_level"]
    out["jacobian_condition"] = rows["jacobian_condition"]
    out["bias_age"] = rows["bias_age_s"]
    out["kinematics_lag"] = rows["kinematics_lag_s"]
    return out


def message_numbers(row: np.ndarray, parameters_out: np.ndarray, full_wrench: bool
                    ) -> list[float]:
    """What ``~/wrench`` and ``~/environment`` carry, from one sample's records (row: (1,)
    :data:`SAMPLE`): force (3) N and torque (3) N·m the robot applies, world frame (torque 0 in
    force mode), then the m parameters and their m standard deviations (the model's units)."""
    torque = row["torque"][0].tolist() if full_wrench else [0.0, 0.0, 0.0]
    return (row["force"][0].tolist() + torque + parameters_out["value"].tolist()
            + parameters_out["std"].tolist())


def frozen_copy(records: np.ndarray) -> np.ndarray:
    """A read-only copy of a record array: its bytes copied, viewed with its dtype (numpy's
    own copy of a structured array with many fields costs ~20 us here; this ~1 us)."""
    return np.frombuffer(records.tobytes(), records.dtype).reshape(records.shape)


def describe_columns(model: ObjectModel) -> Mapping[str, str]:
    """Each estimates.csv column's unit ("" where none), for documentation and reports."""
    units = {"time": "s", "force_x": "N", "force_y": "N", "force_z": "N", "force_along": "N",
             "position_along": "m", "velocity_along": "m/s", "acceleration_along": "m/s^2",
             "measurement_std": "N", "bias_age": "s", "kinematics_lag": "s"}
    for p, unit in zip(model.parameter_names, model.parameter_units, strict=True):
        units[p] = units[f"{p}_std"] = unit
    return {name: units.get(name, "") for name in column_names(model)}
