"""One sample through every stage, compiled: the Pipeline's per-sample arithmetic.

:func:`pipeline_step` reads top to bottom in the order of the design's data flow, each stage a
function of its own records (views of :class:`~.storage.Storage`): validate the sample's
numbers; the momentum observer with friction and bias removed (:func:`observe`); the contact
monitor with bias and noise learning (:func:`monitor`); the wrench map; the direction and the
projections on it (:func:`project`); the kinematics along u and the environment filter
(:func:`object_begin`, :func:`object_row`, :func:`object_updated`; in 3-D
:func:`estimate_spatial`); the health verdict and the output records (:func:`write_outputs`).
The Pinocchio calls that feed it (M, C, g, the contact Jacobian and pose) are made by the
Pipeline before the call, and the sample's joints are already in model order.
:func:`pipeline_run` steps a block of samples.
"""
from __future__ import annotations

import math

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
    outputs,
    storage,
    wrench,
)
from .compiled import entry_kernel, kernel
from .health import PHASE_CONTACT, PHASE_FREE, PHASE_LEARNING
from .outputs import EV_BEGIN, EV_CHANGE, EV_END, EV_NONE, EV_RESTARTED, EV_RESUMED

STEP_DONE, STEP_NON_FINITE_WRENCH, STEP_FILTER_REFUSED, STEP_INVALID_SAMPLE = 0, 1, 2, 3
_BLOCK_COMPLETE = -1   # inside the step: the filter's block is complete (object_row)


@kernel
def validate(s, t, q, v, effort):
    """The checks of samples.SampleValidator that need the numbers (finite stamp, positions,
    velocities and efforts; stamp after the last valid one); on success the stamp is kept."""
    if not math.isfinite(t) or (s.has_valid and t <= s.last_valid_s):
        return False
    for x in q:
        if not math.isfinite(x):
            return False
    for x in v:
        if not math.isfinite(x):
            return False
    for x in effort:
        if not math.isfinite(x):
            return False
    s.has_valid = True
    s.last_valid_s = t
    return True


@kernel
def observe(params, state, joints, t, v, effort, M, C, g):
    """Momentum observer on tau = effort - friction: p = M v, beta = tau + C^T v - g; the
    residual with the bias removed in ``joints.pipeline.residual``. Returns True on a restart.
    params, state: the storage's PARAMS and STATE records; joints: its JOINT rows (see
    :func:`_step` for why the stages take records rather than the whole storage).

    The observer runs on the rows of the measured joints: the last n = len(effort) of the nv
    velocity coordinates. With a moving base (base.source odometry) the first nv - n are the
    base's twist, a measured input. Row j of ``M v' + C v + g = tau + tau_ext`` with
    ``M' = C + C^T`` (Pinocchio's C satisfies it) gives, for p_j = (M v)_j,

        p_j' = (M v')_j + (M' v)_j = tau_j + tau_ext_j - (C v)_j - g_j + (C v)_j + (C^T v)_j
             = tau_j + (C^T v)_j - g_j + tau_ext_j,

    with v the whole velocity (base twist included) and no acceleration of any coordinate, the
    base's included: the measured joints' momentum needs the base's twist and pose only. No
    measured row depends on the forces that act on the base body alone (wheels, a ball,
    the ground): they enter the base's rows, which are not used."""
    nv = v.shape[0]
    n = effort.shape[0]
    off = nv - n
    fp = params.friction
    beta = np.empty(n)
    if fp.enabled:
        compensation.friction_torque(beta, v[off:], joints["friction"],
                                     fp.smoothing_velocity)
        for j in range(n):
            beta[j] = effort[j] - beta[j]
    else:
        for j in range(n):
            beta[j] = effort[j]
    momentum = np.empty(n)
    for j in range(n):
        row = off + j
        ctv = 0.0
        p = 0.0
        for i in range(nv):
            ctv += v[i] * C[i, row]
            p += M[row, i] * v[i]
        beta[j] = beta[j] + ctv - g[row]
        momentum[j] = p
    restarted = observer.observer_step(params.observer, state.observer,
                                       joints["observer_params"], joints["observer"], t,
                                       momentum, beta, M[off:, :])
    for j in range(n):
        joints[j].pipeline.residual = joints[j].observer.torque + joints[j].bias.value
    return restarted


@kernel
def monitor(params, state, joints, t, dt):
    """Bias learning (start-up phase, then quiet free motion), the contact monitor and the
    residual's noise learning. Returns (phase, contact event, contact level). params, state:
    the storage's PARAMS and STATE records; joints: its JOINT rows."""
    s = state.pipeline
    nv = joints.shape[0]
    bp, bs, bj = params.bias, state.bias, joints["bias"]
    cp, cs, cj = params.contact, state.contact, joints["contact"]
    raw = np.empty(nv)
    for j in range(nv):
        raw[j] = joints[j].observer.torque
    scratch = np.empty(nv)
    elapsed = t - s.learning_start_s
    startup = s.learning_s
    if elapsed < startup:
        # the noise only in the second half (the bias has settled), 4x faster than when free
        compensation.bias_update(bp, bs, bj, t, dt, raw, False)
        if elapsed > 0.5 * startup:
            tmp = np.empty(nv)
            for j in range(nv):
                tmp[j] = raw[j] + bj[j].value
            if contact.gather_quiet(cs, cj, dt, tmp) >= cp.learn_interval_s:
                contact.learn_quiet(cp, cs, cj,
                                    4.0 * cp.noise_time_constant_s / max(startup, 1e-3), scratch,
                                    False)
        return PHASE_LEARNING, contact.EVENT_NONE, 0.0
    residual = np.empty(nv)
    for j in range(nv):
        residual[j] = joints[j].pipeline.residual
    level, event = contact.contact_step(cp, cs, cj, t, dt, residual)
    if cs.in_contact:
        if event == contact.EVENT_BEGIN:
            # what was learned since the contact's likely onset was contact force: taken back
            contact.take_back(cp, cs, cj, bj, cs.onset_s)
        return PHASE_CONTACT, event, level
    # learn only from quiet free motion: a residual above the exit level, or evidence of a
    # contact building up, may be contact force, and must not be learned as bias or noise; nor
    # right after a contact ended (it may resume: a held object's force passing through zero)
    contact.snapshot(cp, cs, cj, bj, t)
    if (not cs.pending and level < cp.exit_level and cs.evidence_g == 0.0
            and t - s.contact_end_s > params.pipeline.forget_after_s):
        compensation.bias_update(bp, bs, bj, t, dt, raw, True)
        for j in range(nv):
            joints[j].pipeline.residual = raw[j] + bj[j].value
            residual[j] = joints[j].pipeline.residual
        if contact.gather_quiet(cs, cj, dt, residual) >= cp.learn_interval_s:
            contact.learn_quiet(cp, cs, cj, 1.0, scratch, True)
    elif cs.quiet_count > 0:
        # quiet no more (a contact may be building up): learn the samples gathered so far at
        # once, as a per-sample average would have, before judging more
        contact.learn_quiet(cp, cs, cj, 1.0, scratch, True)
    return PHASE_FREE, event, level


@kernel
def project(params, state, out, dt, J, v, H):
    """Direction u after this sample and the projections on it: returns (force along u N,
    velocity along u m/s, displacement along u since the last sample m). params, state: the
    storage's PARAMS and STATE records."""
    s = state.pipeline
    nv = v.shape[0]
    pv0 = J[0, 0] * v[0]
    pv1 = J[1, 0] * v[0]
    pv2 = J[2, 0] * v[0]
    for j in range(1, nv):
        pv0 += J[0, j] * v[j]
        pv1 += J[1, j] * v[j]
        pv2 += J[2, j] * v[j]
    point_velocity = np.empty(3)
    point_velocity[0], point_velocity[1], point_velocity[2] = pv0, pv1, pv2
    ds = state.direction
    direction.direction_update(params.direction, ds, dt, H[:3, :3], point_velocity)
    u0, u1, u2 = ds.u[0], ds.u[1], ds.u[2]
    f = out.force
    force_along = u0 * f[0] + u1 * f[1] + u2 * f[2]
    p0, p1, p2 = H[0, 3], H[1, 3], H[2, 3]
    dx = 0.0
    if s.point_valid:
        dx = u0 * (p0 - s.point[0]) + u1 * (p1 - s.point[1]) + u2 * (p2 - s.point[2])
    s.point[0], s.point[1], s.point[2] = p0, p1, p2
    s.point_valid = True
    pvs = s.point_velocity
    pvs[0], pvs[1], pvs[2] = pv0, pv1, pv2
    for r in range(3):
        out.direction[r] = ds.u[r]
    return force_along, u0 * pv0 + u1 * pv1 + u2 * pv2, dx


@kernel
def object_begin(params, state, ring, out, t, event):
    """Kinematics along u, first part: the outputs of :func:`object_row` reset, and at a
    contact's beginning x taken from where the residual was last quiet (a new contact) or the
    contact resumed. Returns (event, ready, restart): ready False until the kinematics know the
    nominal interval (the sample then ends here); restart True when the environment filter must
    start again on a regained contact (done by the caller, which holds the filter's records,
    before :func:`object_row`)."""
    s = state.pipeline
    kp, ks = params.kinematics, state.kinematics
    out.filter_code = outputs.FILTER_NOT_UPDATED
    out.regained = False
    out.change = 0
    out.change_g = 0.0
    out.position_along = out.acceleration_along = out.kinematics_lag_s = 0.0
    if not kp.ready:
        return event, False, False
    restart = False
    if event == EV_BEGIN:
        if not s.ever_contact or t - s.contact_end_s > params.pipeline.forget_after_s:
            # a new contact: x from where the residual last was quiet (the contact began there,
            # before the monitor could tell); estimates uncertain again
            kinematics.kinematics_start_contact(ks, ring, s.quiet_position_m)
            state.model.filtered = False
            restart = s.ever_contact
        else:
            event = EV_RESUMED
        s.ever_contact = True
    return event, True, restart


@kernel
def object_row(params, state, ring, coefficients, model_rows, block_force, block_regressor, out,
               t, dt, phase, event, dx, velocity_along, force_along):
    """Kinematics along u, second part: the sample into the kinematics, and in contact the
    object model's measurement row into the environment filter's block (params, state: the
    storage's PARAMS and STATE records; the storage's kinematics ring and weights, measurement
    rows and the filter's block sums). Returns (event, code): code STEP_DONE, or
    STEP_FILTER_REFUSED (its reason in out.filter_code), or _BLOCK_COMPLETE: the block is
    complete, the caller runs the filter's update (:func:`environment.filter_use_block`) and
    then :func:`object_updated`."""
    s = state.pipeline
    kp, ks = params.kinematics, state.kinematics
    kinematics.kinematics_push(kp, ks, ring, coefficients, t, dx, velocity_along, force_along)
    if phase != PHASE_CONTACT:
        if state.contact.onset_g == 0.0:   # no contact under way: x starts here
            s.quiet_position_m = ks.position_m
    else:
        full, acc, vel, pos, force, time = kinematics.kinematics_centre(kp, ks, ring)
        if full:
            rows = model_rows
            object_models.measurement_row(params.model, state.model, rows, dt, acc, vel, pos)
            channels, m = rows.shape[0], rows.shape[1]
            h = np.empty((channels, m))
            for c in range(channels):
                for i in range(m):
                    h[c, i] = rows[c, i].regressor
            forces = np.empty(channels)
            forces[0] = force
            out.filter_time_s = time
            out.filter_force = force
            code = environment.filter_add(params.filter, state.filter, block_force,
                                          block_regressor, time, h, forces)
            out.filter_code = code
            if code == environment.UPDATED:   # the block is complete: the filter's update
                return event, _BLOCK_COMPLETE
            if code != environment.ADDED:
                return event, STEP_FILTER_REFUSED
    return _kinematics_out(out, kp, ks, event)


@kernel
def object_updated(params, state, out, event):
    """Kinematics along u, after the environment filter's update of a complete block: a change
    it declared, and the kinematics' outputs. Returns (event, STEP_DONE)."""
    fo = state.filter_output
    out.change = fo.change
    out.change_g = fo.change_g
    if fo.change != 0:
        event = EV_CHANGE
    return _kinematics_out(out, params.kinematics, state.kinematics, event)


@kernel
def estimate_spatial(st, out, t, dt, phase, event):
    """:func:`object_begin` and :func:`object_row` for the models that need the contact
    point's motion in 3-D (cartesian, revolute, prismatic): the 3-D kinematics, the mechanism's
    path and geometry, and in contact the model's measurement rows through the environment
    filter (a mechanism's only once its geometry is fitted: until then its parameters stay at
    their prior)."""
    s = st.state[0].pipeline
    kp, ss = st.params[0].kinematics, st.state[0].spatial
    mp, ms = st.params[0].mechanism, st.state[0].mechanism
    model_p, model_s = st.params[0].model, st.state[0].model
    out.filter_code = outputs.FILTER_NOT_UPDATED
    out.regained = False
    out.change = 0
    out.change_g = 0.0
    out.position_along = out.acceleration_along = out.kinematics_lag_s = 0.0
    if not kp.ready:
        return event, STEP_DONE
    if event == EV_BEGIN:
        if not s.ever_contact or t - s.contact_end_s > st.params[0].pipeline.forget_after_s:
            # a new contact: x from where the residual last was quiet (see object_begin)
            for r in range(3):
                ss.onset[r] = s.quiet_point[r]
            model_s.filtered = False
            mechanism.mechanism_start(mp, ms, st.path, s.quiet_point)
            if s.ever_contact:
                environment.filter_restart(_filter(st), environment.CHANGE_REGAINED)
                out.regained = True
        else:
            event = EV_RESUMED
        s.ever_contact = True
    force = out.force
    kinematics.spatial_push(kp, ss, st.spatial_ring, st.coefficients, t, s.point,
                            s.point_velocity, force)
    is_mechanism = mp.kind != mechanism.KIND_NONE
    if phase != PHASE_CONTACT:
        if st.state[0].contact.onset_g == 0.0:   # no contact under way: x starts here
            for r in range(3):
                s.quiet_point[r] = s.point[r]
    else:
        if is_mechanism:
            mechanism.mechanism_add(mp, ms, st.path, s.point)
        full, c = kinematics.spatial_centre(kp, ss)
        if full:
            entry = st.spatial_ring[c]
            rows = st.model_rows
            channels, m = rows.shape[0], rows.shape[1]
            forces = np.empty(channels)
            use = True
            if model_p.kind == object_models.MODEL_CARTESIAN:
                x = np.empty(3)
                for r in range(3):
                    x[r] = entry.point[r] - ss.onset[r]
                    forces[r] = entry.force[r]
                object_models.cartesian_row(model_p, model_s, rows, dt, ss.acceleration,
                                            ss.velocity, x)
                u = out.direction
                out.acceleration_along = (u[0] * ss.acceleration[0] + u[1] * ss.acceleration[1]
                                          + u[2] * ss.acceleration[2])
            elif mechanism.mechanism_usable(ms):
                u0, u1, u2, x_along = mechanism.mechanism_along(mp, ms, entry.point, True)
                acc = u0 * ss.acceleration[0] + u1 * ss.acceleration[1] + u2 * ss.acceleration[2]
                vel = u0 * ss.velocity[0] + u1 * ss.velocity[1] + u2 * ss.velocity[2]
                forces[0] = u0 * entry.force[0] + u1 * entry.force[1] + u2 * entry.force[2]
                object_models.measurement_row(model_p, model_s, rows, dt, acc, vel, x_along)
                out.acceleration_along = acc
            else:
                use = False
                model_s.filtered = False   # the matching filter starts again when it is used
            if use:
                h = np.empty((channels, m))
                for cc in range(channels):
                    for i in range(m):
                        h[cc, i] = rows[cc, i].regressor
                out.filter_time_s = entry.time_s
                out.filter_force = forces[0]
                code = environment.filter_add(st.params[0].filter, st.state[0].filter,
                                              st.block_force, st.block_regressor,
                                              entry.time_s, h, forces)
                if code == environment.UPDATED:   # the block is complete: the update
                    environment.filter_use_block(_filter(st))
                out.filter_code = code
                if code != environment.ADDED:
                    if code != environment.UPDATED:
                        return event, STEP_FILTER_REFUSED
                    if model_p.kind == object_models.MODEL_CARTESIAN and model_p.semidefinite:
                        values = np.empty(m)
                        po = st.parameters
                        for i in range(m):
                            values[i] = po[i].filter_output.value
                        for first in (0, 6, 12):   # mass, damping, stiffness
                            object_models.project_semidefinite(values, first)
                        for i in range(m):
                            po[i].filter_output.value = values[i]
                    fo = st.state[0].filter_output
                    out.change = fo.change
                    out.change_g = fo.change_g
                    if fo.change != 0:
                        event = EV_CHANGE
    if is_mechanism and phase == PHASE_CONTACT and mechanism.mechanism_usable(ms):
        # u and x from the mechanism's geometry at the contact point now (in contact only:
        # out of it the point is no longer on the mechanism)
        u0, u1, u2, x_now = mechanism.mechanism_along(mp, ms, s.point, False)
        out.direction[0], out.direction[1], out.direction[2] = u0, u1, u2
        out.force_along = u0 * force[0] + u1 * force[1] + u2 * force[2]
        pv = s.point_velocity
        out.velocity_along = u0 * pv[0] + u1 * pv[1] + u2 * pv[2]
        out.position_along = x_now
    elif phase == PHASE_CONTACT and model_p.kind == object_models.MODEL_CARTESIAN:
        u = out.direction
        out.position_along = (u[0] * (s.point[0] - ss.onset[0]) + u[1] * (s.point[1]
                              - ss.onset[1]) + u[2] * (s.point[2] - ss.onset[2]))
    out.kinematics_lag_s = kp.half * kp.nominal_dt_s
    return event, STEP_DONE


@kernel
def _kinematics_out(out, kp, ks, event):
    out.position_along = ks.position_m
    out.acceleration_along = ks.acceleration
    out.kinematics_lag_s = kp.half * kp.nominal_dt_s
    return event, STEP_DONE


@kernel
def write_outputs(params, state, prm, joints, out, out_params, out_joints, t, phase, event,
                  level, condition):
    """The sample's output records and its health verdict. params, state: the storage's
    PARAMS and STATE records; prm: its PARAMETER rows; joints: its JOINT rows."""
    s = state.pipeline
    fs, fo = state.filter, state.filter_output
    m = out_params.shape[0]
    if fs.samples == 0:   # no update since the last reset: the prior
        for i in range(m):
            out_params[i].value = prm[i].filter_params.prior_mean
            out_params[i].std = prm[i].filter_params.prior_std
            out_params[i].excited = False
            out_params[i].converged = False
        out.nis = out.nis_average = out.nis_lower = 0.0
        out.nis_upper = math.inf
        out.measurement_std = params.filter.measurement_std0
        all_converged = False
        samples = 0
    else:
        for i in range(m):
            po = prm[i].filter_output
            out_params[i].value = po.value
            out_params[i].std = po.std
            out_params[i].excited = po.excited
            out_params[i].converged = po.converged
        out.nis = fo.nis
        out.nis_average = fo.nis_average
        out.nis_lower = fo.nis_lower
        out.nis_upper = fo.nis_upper
        out.measurement_std = math.sqrt(fo.r)
        all_converged = fo.all_converged
        samples = fo.samples
    mp = params.mechanism
    geometry = mechanism.GEOMETRY_NONE
    if mp.kind != mechanism.KIND_NONE:
        ms = state.mechanism
        geometry = ms.code
        out.geometry = geometry
        for r in range(3):
            out.axis[r] = ms.axis[r]
            out.axis_point[r] = ms.axis_point[r]
        revolute = mp.kind == mechanism.KIND_REVOLUTE
        out.radius = ms.radius_m if revolute else 0.0
        out.angle = ms.angle_now_rad if revolute else 0.0
        out.swept_arc = ms.swept_rad if revolute else 0.0
        out.travel = ms.travel_m
        out.path_rms = ms.circle_rms_m if revolute else ms.line_rms_m
        out.radius_std = ms.radius_std_m if revolute else 0.0
        out.axis_std = ms.axis_std_rad if revolute else 0.0
        if geometry != mechanism.GEOMETRY_CONVERGED:   # the geometry converges first
            all_converged = False
            for i in range(m):
                out_params[i].converged = False
    if phase != PHASE_CONTACT:
        all_converged = False
        for i in range(m):
            out_params[i].converged = False
    dt_avg = s.dt_average_s
    rate = 1.0 / dt_avg if dt_avg > 0.0 else 0.0
    elapsed = t - s.learning_start_s
    out.contact_level = level
    out.jacobian_condition = condition
    out.rate_hz = rate
    bs = state.bias
    out.bias_age_s = t - bs.last_learned_s if bs.learned else math.inf
    out.phase = phase
    out.event = event
    out.all_converged = all_converged
    out.filter_samples = samples
    out.startup_remaining_s = s.learning_s - elapsed if elapsed < s.learning_s else 0.0
    out.since_contact_end_s = t - s.contact_end_s if s.ever_contact else math.inf
    out.observer_restarts = state.observer.restarts
    for j in range(out_joints.shape[0]):
        out_joints[j].external_torque = joints[j].pipeline.residual
        out_joints[j].bias = joints[j].bias.value
        out_joints[j].raw_residual = joints[j].observer.torque
    out.level, out.state, out.findings = health.health_verdict(
        params.health, phase, out.since_contact_end_s, all_converged, out.nis_average,
        out.nis_lower, out.nis_upper, samples, condition, s.recent_rejects, rate,
        s.stamp_from_receive)
    # a path that fits nothing warns at once; "straight" or "curved" (the other mechanism's
    # shape) once the path is twice mechanism.min_travel: a hinge's first centimetres are
    # straight within their noise, and that is not yet a finding
    if phase == PHASE_CONTACT and (geometry == mechanism.GEOMETRY_NO_FIT or (
            (geometry == mechanism.GEOMETRY_STRAIGHT or geometry == mechanism.GEOMETRY_CURVED)
            and state.mechanism.travel_m >= 2.0 * mp.min_travel_m)):
        out.findings |= health.FINDING_PATH
    if s.base_findings != 0:   # a moving base's inputs stale, refused or too slow (caller)
        out.findings |= s.base_findings
        if out.level == health.OK:
            out.level = health.WARN


@kernel
def _filter(st):
    """The environment filter's records (views of the storage), as its functions take them."""
    return environment.FilterRecords(
        st.params["filter"], st.parameters["filter_params"], st.state["filter"],
        st.parameters["filter"], st.gram, st.covariance, st.nis_bounds, st.nis_ring,
        st.history_time, st.history_force, st.history_regressor, st.lag_ring, st.hac,
        st.block_force, st.block_regressor, st.state["filter_output"],
        st.parameters["filter_output"])


@kernel
def _step(st, t, q, v, effort, M, C, g, J, H, out, out_params, out_joints):
    # The stages take the records they use (params, state: records, passed as pointers, no
    # reference count) and the few arrays they need, not the whole storage: every array
    # argument of a compiled call costs an atomic reference count increment and decrement
    # (Numba's runtime), 20 of each for the storage. Counted with gdb at the runtime's
    # increment over 2000 samples in contact (2026-12-05): 209 increments per sample when
    # every stage took the storage, 85 now; the step's compiled time per sample fell by ~40 %.
    params, state, joints = st.params[0], st.state[0], st.joints
    s = state.pipeline
    if not validate(s, t, q, v, effort):
        return STEP_INVALID_SAMPLE
    if s.learning_pending:
        s.learning_pending = False
        s.learning_start_s = t
        s.learning_s = params.pipeline.startup_s
    dt = t - s.last_time_s if s.started else 0.0

    restarted = observe(params, state, joints, t, v, effort, M, C, g)
    phase, contact_event, level = monitor(params, state, joints, t, dt)
    event = EV_RESTARTED if restarted else EV_NONE
    if contact_event == contact.EVENT_BEGIN:
        event = EV_BEGIN
    elif contact_event == contact.EVENT_END:
        event = EV_END

    contact_joints = joints["contact"]
    contact.weights(state.contact, contact_joints)
    n = effort.shape[0]
    residual = np.empty(n)
    for j in range(n):
        residual[j] = joints[j].pipeline.residual
    wp = params.wrench
    wrench6 = np.empty(6)
    # the measured joints' columns: forces on a moving base's own body never enter
    condition = wrench.wrench_solve(wp, wrench6, J[:, v.shape[0] - n:], residual,
                                    contact_joints)
    check = wrench6[0] + wrench6[1] + wrench6[2]
    if wp.full_wrench:
        check += wrench6[3] * wrench6[3] + wrench6[4] * wrench6[4] + wrench6[5] * wrench6[5]
    if not math.isfinite(check):
        return STEP_NON_FINITE_WRENCH
    for r in range(3):
        out.force[r] = wrench6[r]
        out.torque[r] = wrench6[3 + r]

    force_along, velocity_along, dx = project(params, state, out, dt, J, v, H)
    out.force_along = force_along
    out.velocity_along = velocity_along

    if params.model.kind != object_models.MODEL_ALONG_DIRECTION:
        event, code = estimate_spatial(st, out, t, dt, phase, event)
    else:   # kinematics along u and the object's parameters (the filter's records only where
        # its update needs them: see the comment at the top)
        event, ready, restart = object_begin(params, state, st.ring, out, t, event)
        code = STEP_DONE
        if ready:
            if restart:
                environment.filter_restart(_filter(st), environment.CHANGE_REGAINED)
                out.regained = True
            event, code = object_row(params, state, st.ring, st.coefficients, st.model_rows,
                                     st.block_force, st.block_regressor, out, t, dt, phase,
                                     event, dx, velocity_along, force_along)
            if code == _BLOCK_COMPLETE:
                environment.filter_use_block(_filter(st))
                event, code = object_updated(params, state, out, event)
    if code != STEP_DONE:
        return code
    if event == EV_END:
        s.contact_end_s = t

    s.started = True
    s.last_time_s = t
    if dt > 0.0:
        s.dt_average_s = dt if s.dt_average_s == 0.0 else s.dt_average_s + 0.01 * (
            dt - s.dt_average_s)
    write_outputs(params, state, st.parameters, joints, out, out_params, out_joints, t, phase,
                  event, level, condition)
    return STEP_DONE


def _types():
    """Numba types of the step's arguments, from prototype records (any sizes: the types do
    not depend on them)."""
    import numba

    f64 = numba.float64
    return (numba.typeof(storage.new_storage(1, object_models.ALONG_DIRECTION.size)), f64,
            numba.types.Array(f64, 1, "C"), numba.types.Array(f64, 2, "A"))


def _step_signature():
    import numba
    st, f64, c1, a2 = _types()
    out = numba.typeof(outputs.SAMPLE.one())
    out_params = numba.typeof(outputs.PARAMETER.many(1))
    out_joints = numba.typeof(outputs.JOINT.many(1))
    return numba.int64(st, f64, c1, c1, c1, a2, a2, c1, a2, a2, out, out_params, out_joints,
                       numba.int64, numba.boolean)


@entry_kernel(_step_signature)
def pipeline_step(st, t, q, v, effort, M, C, g, J, H, out, out_params, out_joints,
                  recent_rejects, from_receive):
    """One sample through every stage (see the module docstring). st: :class:`~.storage.Storage`;
    t: stamp, s; q (nq,) configuration, v (nv,) velocity, effort (n,) of the measured joints
    (the last n velocity coordinates; the first nv - n a moving base's twist), in model order;
    M (nv, nv), C (nv, nv) Coriolis matrix, g (nv,), J (6, nv) world-aligned contact Jacobian,
    H (4, 4) contact-frame pose, all from Pinocchio; out (1,) outputs.SAMPLE, out_params (m,)
    outputs.PARAMETER and out_joints (n,) outputs.JOINT receive the sample's outputs;
    recent_rejects: samples rejected over the second before this one, from_receive: True when
    t is the receive time (both the caller's, as :func:`pipeline_run` takes them per sample;
    arguments rather than two Python-side writes into the state record, ~0.3 us each).

    Returns STEP_DONE (outputs filled), STEP_INVALID_SAMPLE (a non-finite number or a stamp not
    after the last valid one: nothing changed; samples.SampleValidator says which),
    STEP_NON_FINITE_WRENCH (the wrench came out non-finite) or STEP_FILTER_REFUSED (the filter
    refused its measurement row, its code in out.filter_code)."""
    s = st.state[0].pipeline
    s.recent_rejects = recent_rejects
    s.stamp_from_receive = from_receive
    return _step(st, t, q, v, effort, M, C, g, J, H, out[0], out_params, out_joints)


def _run_signature():
    import numba
    st, _, c1, _ = _types()
    c2 = numba.types.Array(numba.float64, 2, "C")
    c3 = numba.types.Array(numba.float64, 3, "C")
    b1 = numba.types.Array(numba.boolean, 1, "C")
    rows = numba.types.Array(numba.from_dtype(outputs.SAMPLE.dtype), 1, "C")
    parameter_rows = numba.types.Array(numba.from_dtype(outputs.PARAMETER.dtype), 2, "C")
    out_joints = numba.typeof(outputs.JOINT.many(1))
    return numba.types.UniTuple(numba.int64, 2)(
        st, numba.int64, c1, c2, c2, c2, c3, c3, c2, c3, c3, b1, c1, rows, parameter_rows,
        out_joints)


@entry_kernel(_run_signature)
def pipeline_run(st, start, T, Q, V, E, M, C, G, J, H, from_receive, reject_times, rows,
                 parameter_rows, out_joints):
    """:func:`pipeline_step` on samples ``start``, ``start`` + 1, ... of a block (row i of
    each array: sample i; ``rows[i]`` and ``parameter_rows[i]`` its outputs; from_receive (k,)
    True where a stamp is the receive time; out_joints (n,) the last sample's joint outputs),
    until the block ends or a step does not return STEP_DONE. reject_times: the stamps, s, of
    the samples rejected before ``start`` (ascending), from which each sample's count of rejects
    over the second before it is taken.

    Returns (index, code): the first sample whose step returned ``code`` != STEP_DONE, or
    (k, STEP_DONE) when every sample from ``start`` on was done."""
    k = T.shape[0]
    first = 0
    m = reject_times.shape[0]
    s = st.state[0].pipeline
    for i in range(start, k):
        t = T[i]
        while first < m and reject_times[first] < t - 1.0:
            first += 1
        s.recent_rejects = m - first
        s.stamp_from_receive = from_receive[i]
        code = _step(st, t, Q[i], V[i], E[i], M[i], C[i], G[i], J[i], H[i], rows[i],
                     parameter_rows[i], out_joints)
        if code != STEP_DONE:
            return i, code
    return k, STEP_DONE
