"""The Pipeline's storage: every stage's records, gathered into a few arrays.

Each stage declares its own records (its module's ``PARAMS``, ``STATE``, per-joint and
per-parameter records). The Pipeline keeps them side by side as fields of nested records, so
that one compiled call per sample receives a handful of arrays instead of one per stage record
(passing an array into compiled code costs about 0.05-0.1 us here, so at 1 kHz the count
matters: 36 stage arrays cost the step call several microseconds):

- ``params`` (1,) :data:`PARAMS`: every stage's parameters record, by stage name;
- ``state`` (1,) :data:`STATE`: every stage's state record and the filter's last update;
- ``joints`` (nv,) :data:`JOINT`: every stage's per-joint records;
- ``parameters`` (m,) :data:`PARAMETER`: the environment filter's and the object model's
  per-parameter records;
- the arrays whose size is not nv or m: the filter's Gram matrix and covariance (m, m), NIS
  table and window, block history, the kinematics ring buffer and coefficients.

A stage object holds views of its fields (``params["observer"]`` is a (1,) array of the
observer's parameters record, sharing memory), so the object's methods and the compiled step
work on the same numbers. In compiled code a stage function gets ``st.params[0].observer``
(its record) and ``st.joints["observer"]`` (its per-joint array).
"""
from __future__ import annotations

from typing import NamedTuple

import numpy as np

from . import (
    compensation,
    contact,
    direction,
    environment,
    health,
    kinematics,
    mechanism,
    object_models,
    observer,
    wrench,
)
from .records import B1, F8, I8, record

PIPELINE_PARAMS = record(
    "pipeline parameters",
    ("startup_s", F8, "s", "bias-learning phase after start or reset (bias.startup)"),
    ("forget_after_s", F8, "s", "a contact regained later than this after one ended is new"),
)
PIPELINE_STATE = record(
    "pipeline state",
    ("started", B1, "", "a sample has been processed since the last reset"),
    ("last_time_s", F8, "s", "stamp of the last processed sample"),
    ("has_valid", B1, "", "a sample passed validation since the last reset"),
    ("last_valid_s", F8, "s", "stamp of the last sample that passed validation"),
    ("learning_pending", B1, "", "a bias-learning phase starts at the next sample"),
    ("learning_start_s", F8, "s", "start of the current bias-learning phase"),
    ("learning_s", F8, "s", "length of the current bias-learning phase"),
    ("ever_contact", B1, "", "a contact began since the last reset"),
    ("contact_end_s", F8, "s", "when the last contact ended"),
    ("quiet_position_m", F8, "m", "position along u where the residual was last quiet"),
    ("dt_average_s", F8, "s", "running mean sample interval"),
    ("point_valid", B1, "", "point holds the previous contact point"),
    ("point", F8, (3,), "m", "previous contact point, world frame"),
    ("recent_rejects", I8, "", "samples rejected over the second before this one (caller)"),
    ("stamp_from_receive", B1, "", "this sample's stamp is its receive time (caller)"),
    ("point_velocity", F8, (3,), "m/s", "velocity of the contact point, world frame"),
    ("quiet_point", F8, (3,), "m", "contact point where the residual was last quiet"),
    ("base_findings", I8, "", "a moving base's inputs stale, refused or too slow: "
     "base.FINDING_* bits (caller)"),
)
PIPELINE_JOINT = record(
    "pipeline, per joint",
    ("residual", F8, "N·m or N", "the observer's output with the bias removed"),
)

PARAMS = np.dtype([
    ("pipeline", PIPELINE_PARAMS.dtype), ("observer", observer.PARAMS.dtype),
    ("friction", compensation.FRICTION_PARAMS.dtype), ("bias", compensation.BIAS_PARAMS.dtype),
    ("contact", contact.PARAMS.dtype), ("wrench", wrench.PARAMS.dtype),
    ("direction", direction.PARAMS.dtype), ("kinematics", kinematics.PARAMS.dtype),
    ("model", object_models.PARAMS.dtype), ("filter", environment.PARAMS.dtype),
    ("health", health.PARAMS.dtype), ("mechanism", mechanism.PARAMS.dtype)])
STATE = np.dtype([
    ("pipeline", PIPELINE_STATE.dtype), ("observer", observer.STATE.dtype),
    ("bias", compensation.BIAS_STATE.dtype), ("contact", contact.STATE.dtype),
    ("direction", direction.STATE.dtype), ("kinematics", kinematics.STATE.dtype),
    ("model", object_models.STATE.dtype), ("filter", environment.STATE.dtype),
    ("filter_output", environment.OUTPUT.dtype),
    ("spatial", kinematics.SPATIAL_STATE.dtype), ("mechanism", mechanism.STATE.dtype)])
JOINT = np.dtype([
    ("pipeline", PIPELINE_JOINT.dtype), ("observer_params", observer.JOINT_PARAMS.dtype),
    ("observer", observer.JOINTS.dtype), ("friction", compensation.FRICTION_JOINTS.dtype),
    ("bias", compensation.BIAS_JOINTS.dtype), ("contact", contact.JOINTS.dtype)])
PARAMETER = np.dtype([
    ("filter_params", environment.PARAMETER_PARAMS.dtype),
    ("filter", environment.PARAMETERS.dtype),
    ("filter_output", environment.PARAMETER_OUTPUT.dtype)])


class Storage(NamedTuple):
    """Every stage's records: what the compiled step reads and changes."""

    params: np.ndarray         # (1,) PARAMS
    state: np.ndarray          # (1,) STATE
    joints: np.ndarray         # (nv,) JOINT
    parameters: np.ndarray     # (m,) PARAMETER
    gram: np.ndarray           # (m, m) the environment filter's G = sum h h^T
    covariance: np.ndarray     # (m, m) its P
    nis_bounds: np.ndarray     # (nis capacity + 1,) environment.NIS_BOUNDS
    nis_ring: np.ndarray       # (nis capacity,)
    history_time: np.ndarray   # (history capacity,) the filter's kept blocks: times s
    history_force: np.ndarray  # (history capacity, p) forces N
    history_regressor: np.ndarray  # (history capacity, p, m) regressors
    lag_ring: np.ndarray       # (lags, m) the filter's last scores
    hac: np.ndarray            # (m, m) their correlation-consistent sum
    block_force: np.ndarray    # (p,) the filter's block being gathered: sum of forces N
    block_regressor: np.ndarray  # (p, m) sum of regressors
    model_rows: np.ndarray     # (p, m) object_models.ROW: the measurement row
    ring: np.ndarray           # (2n,) kinematics.RING
    coefficients: np.ndarray   # (n,) kinematics.COEFFICIENTS
    spatial_ring: np.ndarray   # (2n,) kinematics.SPATIAL_RING (2 where not used)
    path: np.ndarray           # (capacity,) mechanism.PATH: the kept contact path


def new_storage(nv: int, m: int, channels: int = 1, path: int = 2) -> Storage:
    """Zeroed records for nv joints and m object parameters with ``channels`` rows per sample
    and a path of ``path`` points (windows and the kinematics rings are placeholders until the
    Pipeline sizes them)."""
    ring, coefficients = kinematics.placeholder()
    return Storage(np.zeros(1, PARAMS), np.zeros(1, STATE), np.zeros(nv, JOINT),
                   np.zeros(m, PARAMETER), np.zeros((m, m)), np.zeros((m, m)),
                   environment.NIS_BOUNDS.many(2), np.zeros(1), np.zeros(2),
                   np.zeros((2, channels)), np.zeros((2, channels, m)), np.zeros((1, m)),
                   np.zeros((m, m)), np.zeros(channels),
                   np.zeros((channels, m)),
                   object_models.ROW.many(channels * m).reshape(channels, m), ring,
                   coefficients, kinematics.spatial_placeholder(), mechanism.PATH.many(path))


def observer_views(st: Storage) -> observer.ObserverRecords:
    return observer.ObserverRecords(st.params["observer"], st.state["observer"],
                                    st.joints["observer_params"], st.joints["observer"])


def friction_views(st: Storage) -> compensation.FrictionRecords:
    return compensation.FrictionRecords(st.params["friction"], st.joints["friction"])


def bias_views(st: Storage) -> compensation.BiasRecords:
    return compensation.BiasRecords(st.params["bias"], st.state["bias"], st.joints["bias"])


def contact_views(st: Storage) -> contact.ContactRecords:
    return contact.ContactRecords(st.params["contact"], st.state["contact"],
                                  st.joints["contact"])


def model_views(st: Storage) -> object_models.ModelRecords:
    return object_models.ModelRecords(st.params["model"], st.state["model"], st.model_rows)


def filter_views(st: Storage) -> environment.FilterRecords:
    return environment.FilterRecords(
        st.params["filter"], st.parameters["filter_params"], st.state["filter"],
        st.parameters["filter"], st.gram, st.covariance, st.nis_bounds, st.nis_ring,
        st.history_time, st.history_force, st.history_regressor, st.lag_ring, st.hac,
        st.block_force, st.block_regressor, st.state["filter_output"],
        st.parameters["filter_output"])
