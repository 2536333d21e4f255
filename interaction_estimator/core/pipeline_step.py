"""The Pipeline's per-sample arithmetic, compiled: the stages of one sample in one call.

:class:`~interaction_estimator.core.pipeline.Pipeline` keeps every stage's state in a few float arrays
(layout below) and hands each stage object views into them, so the stages' own methods and this
step work on the same numbers. Per sample the Pipeline makes the Pinocchio calls, then calls
:func:`pipeline_step` once; the step calls the stages' compiled functions in the order of the
design (observer with bias and friction removed, contact monitor with bias and noise learning,
wrench map, direction, kinematics along u, environment filter) and writes one output row, from
which the Pipeline builds the :class:`~interaction_estimator.core.pipeline.Estimate` and the health
verdict. Only pipeline.py and this module compose the stages.

Arrays (nv joints):
- ``S`` (S_SIZE,): the stages' scalar blocks at S_OBSERVER, S_BIAS, ... and the Pipeline's own
  scalars (PS_*);
- ``JS`` (JS_ROWS, nv): per-joint rows (observer, bias, friction, contact monitor, scratch);
- ``P3`` (nv, 3, 3): the Kalman-form observer's per-joint covariances;
- ``KB`` (6, 2n): the kinematics buffer (a (6, 2) placeholder until it is built);
- ``W``: the environment filter's windows; ``out`` (OUT_FIXED + 3 nv,): the output row.
"""
from __future__ import annotations

import math

import numpy as np

from .compiled import kernel
from .environment import (CHANGE_REGAINED, EO_NIS, EO_NIS_AVERAGE, EO_NIS_HI, EO_NIS_LO,
                          EO_PATTERN, EO_R, EO_SAMPLES, EO_STD, EO_THETA, EF_SAMPLES,
                          FILTER_CONFIG_SIZE, FILTER_OUTPUT_SIZE, FILTER_STATE_SIZE, UPDATED,
                          EO_CHANGE, EO_CHANGE_G, filter_inflate, filter_update)
from .health import PHASE_CONTACT, PHASE_FREE, PHASE_LEARNING, PHASES, health_verdict  # noqa: F401
from .observer import (BI_LAST, BIAS_SIZE, CM_EXIT, CM_IN_CONTACT, CM_PENDING, CONTACT_ROWS,
                       CONTACT_SIZE, EVENT_BEGIN, EVENT_END, OB_RESTARTS, OBSERVER_ROWS,
                       OBSERVER_SIZE, bias_update, contact_learn_power, contact_step,
                       contact_weights, friction_torque, observer_step)
from .wrench import (DI_U, DIRECTION_SIZE, KI_ACC, KI_HALF, KI_NOMINAL_DT, KI_POSITION,
                     KI_READY, KINEMATICS_SIZE, direction_update, kinematics_aligned_row,
                     kinematics_push, kinematics_start_contact, wrench_solve)

# --- S: blocks of the stages, then the Pipeline's scalars ----------------------------------
S_OBSERVER = 0
S_BIAS = S_OBSERVER + OBSERVER_SIZE
S_CONTACT = S_BIAS + BIAS_SIZE
S_DIRECTION = S_CONTACT + CONTACT_SIZE
S_KINEMATICS = S_DIRECTION + DIRECTION_SIZE
S_FILTER = S_KINEMATICS + KINEMATICS_SIZE
S_FILTER_CONFIG = S_FILTER + FILTER_STATE_SIZE
S_FILTER_OUTPUT = S_FILTER_CONFIG + FILTER_CONFIG_SIZE
S_PIPELINE = S_FILTER_OUTPUT + FILTER_OUTPUT_SIZE
_P = S_PIPELINE
PS_T_PREV = _P + 0          # s, stamp of the last sample (NaN: none yet)
PS_T_START = _P + 1         # s, start of the bias-learning phase (NaN: at the next sample)
PS_STARTUP = _P + 2         # s, length of the current bias-learning phase
PS_STARTUP_SETTING = _P + 3  # s, bias.startup
PS_CONTACT_END = _P + 4     # s, when the last contact ended (-inf: never)
PS_EVER_CONTACT = _P + 5    # 1 once a contact began since the last reset
PS_QUIET_POSITION = _P + 6  # m, running position along u where the residual was last quiet
PS_DT_AVG = _P + 7          # s, running mean sample interval
PS_QUIET_DT = _P + 8        # s, duration of the quiet samples gathered for noise learning
PS_QUIET_COUNT = _P + 9     # their number
PS_POINT_VALID = _P + 10    # 1: PS_POINT holds the previous contact point
PS_POINT = _P + 11          # 11..13: previous contact point, m, world
PS_LEARN_INTERVAL = _P + 14  # s, noise-learning interval
PS_NOISE_TC = _P + 15       # s, contact.noise_time_constant
PS_FORGET_AFTER = _P + 16   # s, contact.forget_after
PS_FULL_WRENCH = _P + 17    # 1: wrench.mode wrench
PS_DAMPING2 = _P + 18       # wrench.damping^2
PS_FRICTION_ON = _P + 19    # 1: motor-side efforts with a friction model
PS_FRICTION_EPS = _P + 20   # rad/s, friction.smoothing_velocity
PS_PRIOR_MEAN = _P + 21     # 21..24 filter.initial_mean
PS_PRIOR_STD = _P + 25      # 25..28 filter.initial_std
PS_PRIOR_MEASUREMENT_STD = _P + 29  # N, filter.measurement_std
PS_LAST_VALID = _P + 30     # s, stamp of the last sample that passed validation (NaN: none)
PS_CONDITION_LIMIT = _P + 31  # wrench.condition_limit
PS_MIN_RATE = _P + 32       # Hz, health.min_rate
PS_STALE_AFTER = _P + 33    # s, health.stale_after
PS_RECENT_REJECTS = _P + 34  # samples rejected over the second before this sample (set by the caller)
PS_FROM_RECEIVE = _P + 35   # 1: this sample's stamp is its receive time (set by the caller)
S_SIZE = _P + 36

# --- JS: per-joint rows ----------------------------------------------------------------------
J_OBSERVER = 0              # OBSERVER_ROWS rows
J_BIAS = J_OBSERVER + OBSERVER_ROWS
J_VISCOUS = J_BIAS + 1      # N·m·s/rad
J_COULOMB = J_VISCOUS + 1   # N·m
J_CONTACT = J_COULOMB + 1   # CONTACT_ROWS rows: noise variance, 1/(nv var), weights, quiet sum
J_QUIET = J_CONTACT + 3
J_MOMENTUM = J_CONTACT + CONTACT_ROWS   # scratch: p = M v
J_BETA = J_MOMENTUM + 1                 # scratch: tau + C^T v - g
J_RESIDUAL = J_BETA + 1                 # scratch: raw + bias
J_TMP = J_RESIDUAL + 1
JS_ROWS = J_TMP + 1

# --- out: the output row ---------------------------------------------------------------------
O_FORCE = 0                 # 0..2 N, robot on environment, world
O_TORQUE = 3                # 3..5 N·m
O_DIRECTION = 6             # 6..8 u
O_FORCE_ALONG = 9           # N
O_POSITION_ALONG = 10       # m
O_VELOCITY_ALONG = 11       # m/s
O_ACCELERATION_ALONG = 12   # m/s^2
O_PARAMETERS = 13           # 13..16 kg, N·s/m, N/m, N
O_STD = 17                  # 17..20
O_NIS = 21
O_NIS_AVERAGE = 22
O_NIS_LO = 23
O_NIS_HI = 24
O_MEASUREMENT_STD = 25      # N
O_CONTACT_LEVEL = 26
O_CONDITION = 27
O_RATE = 28                 # Hz
O_LAG = 29                  # s
O_BIAS_AGE = 30             # s (inf: never learned)
O_PHASE = 31                # PHASE_*
O_EVENT = 32                # EV_*
O_PATTERN = 33              # excited bits 0-3, converged bits 4-7
O_FILTER_SAMPLES = 34
O_STARTUP_REMAINING = 35    # s
O_SINCE_CONTACT_END = 36    # s (inf: never in contact)
O_CHANGE = 37               # CHANGE_* bits of this sample's filter update
O_CHANGE_G = 38
O_RESTARTS = 39
O_ROW = 40                  # 40..45 the filter's input of this sample: h (4), f N, t s
O_UPDATED = 46              # 1: the filter was updated at this sample
O_REGAINED = 47             # 1: the covariance was inflated for a regained contact
O_LEVEL = 48                # health level (health.OK ... STALE)
O_STATE = 49                # health state code (health.STATE_*; word in health.STATES)
O_FINDINGS = 50             # health findings (health.FINDING_* bits)
OUT_FIXED = 51              # then residual (nv) N·m, bias (nv) N·m, raw residual (nv) N·m

EV_NONE, EV_RESTARTED, EV_BEGIN, EV_END, EV_RESUMED, EV_CHANGE = 0, 1, 2, 3, 4, 5
EVENTS = ("", "observer_restarted", "contact_begin", "contact_end", "contact_resumed")

STEP_DONE, STEP_NON_FINITE_WRENCH, STEP_FILTER_REFUSED, STEP_INVALID_SAMPLE = 0, 1, 2, 3


@kernel
def _learn_noise(S, JS, speed):
    """The residual's noise level from the quiet samples gathered since the last call
    (learned ``speed`` times faster than their duration says); the gathered sum cleared."""
    nv = JS.shape[1]
    quiet = JS[J_QUIET]
    count = S[PS_QUIET_COUNT]
    mean_square = JS[J_TMP]
    for i in range(nv):
        mean_square[i] = quiet[i] / count
    contact_learn_power(JS[J_CONTACT:J_CONTACT + CONTACT_ROWS], S[S_CONTACT:S_CONTACT +
                                                                  CONTACT_SIZE],
                        S[PS_QUIET_DT] * speed, mean_square)
    for i in range(nv):
        quiet[i] = 0.0
    S[PS_QUIET_DT] = 0.0
    S[PS_QUIET_COUNT] = 0.0


@kernel
def _gather_quiet(S, JS, dt, residual):
    """Add one quiet sample to the noise-learning sums; returns the interval gathered, s."""
    quiet = JS[J_QUIET]
    for i in range(JS.shape[1]):
        quiet[i] += residual[i] * residual[i]
    S[PS_QUIET_COUNT] += 1.0
    S[PS_QUIET_DT] += dt
    return S[PS_QUIET_DT]


@kernel
def _valid(S, t, q, v, effort):
    """The checks of samples.SampleValidator that need the numbers (finite stamp, positions,
    velocities and efforts; stamp after the last valid one); on success the stamp is kept."""
    last = S[PS_LAST_VALID]
    if not math.isfinite(t) or t <= last:
        return False
    for x in q:
        if not math.isfinite(x):
            return False
    for j in range(v.shape[0]):
        if not (math.isfinite(v[j]) and math.isfinite(effort[j])):
            return False
    S[PS_LAST_VALID] = t
    return True


@kernel
def pipeline_step(S, JS, P3, KB, W, out, t, q, v, effort, M, C, g, J, H):
    """One sample through every stage (see the module docstring). t: stamp, s; q (nq,)
    configuration, v, effort (nv,) in model order; M (nv, nv), C (nv, nv) Coriolis matrix,
    g (nv,), J (6, nv) world-aligned contact Jacobian, H (4, 4) contact-frame pose, all from
    Pinocchio.

    Returns STEP_DONE (``out`` filled), STEP_INVALID_SAMPLE (a non-finite number or a stamp
    not after the last valid one: nothing changed; samples.SampleValidator says which),
    STEP_NON_FINITE_WRENCH (the wrench came out non-finite) or STEP_FILTER_REFUSED (the filter
    refused its input, out[O_ROW:O_ROW + 6], with the code in out[O_UPDATED])."""
    if not _valid(S, t, q, v, effort):
        return STEP_INVALID_SAMPLE
    nv = v.shape[0]
    obs = S[S_OBSERVER:S_OBSERVER + OBSERVER_SIZE]
    bias_sc = S[S_BIAS:S_BIAS + BIAS_SIZE]
    contact_sc = S[S_CONTACT:S_CONTACT + CONTACT_SIZE]
    contact_rows = JS[J_CONTACT:J_CONTACT + CONTACT_ROWS]
    kin = S[S_KINEMATICS:S_KINEMATICS + KINEMATICS_SIZE]
    fst = S[S_FILTER:S_FILTER + FILTER_STATE_SIZE]
    fcf = S[S_FILTER_CONFIG:S_FILTER_CONFIG + FILTER_CONFIG_SIZE]
    fo = S[S_FILTER_OUTPUT:S_FILTER_OUTPUT + FILTER_OUTPUT_SIZE]
    bias = JS[J_BIAS]
    residual = JS[J_RESIDUAL]

    if S[PS_T_START] != S[PS_T_START]:
        S[PS_T_START] = t
        S[PS_STARTUP] = S[PS_STARTUP_SETTING]
    t_prev = S[PS_T_PREV]
    dt = 0.0 if t_prev != t_prev else t - t_prev

    # momentum observer: p = M v, beta = (tau - tau_f) + C^T v - g
    momentum = JS[J_MOMENTUM]
    beta = JS[J_BETA]
    if S[PS_FRICTION_ON] != 0.0:
        friction_torque(beta, v, JS[J_VISCOUS], JS[J_COULOMB], S[PS_FRICTION_EPS])
        for j in range(nv):
            beta[j] = effort[j] - beta[j]
    else:
        for j in range(nv):
            beta[j] = effort[j]
    for j in range(nv):
        ctv = 0.0
        p = 0.0
        for i in range(nv):
            ctv += v[i] * C[i, j]
            p += M[j, i] * v[i]
        beta[j] = beta[j] + ctv - g[j]
        momentum[j] = p
    restarted = observer_step(JS[J_OBSERVER:J_OBSERVER + 6], P3, obs, JS[J_OBSERVER + 6], t,
                              momentum, beta, M)
    raw = JS[J_OBSERVER + 1]
    for j in range(nv):
        residual[j] = raw[j] + bias[j]

    # bias learning, contact monitor, noise learning
    elapsed = t - S[PS_T_START]
    startup = S[PS_STARTUP]
    event = EV_RESTARTED if restarted else EV_NONE
    contact_level = 0.0
    if elapsed < startup:
        phase = PHASE_LEARNING
        # the noise only in the second half (the bias has settled), 4x faster than when free
        bias_update(bias, bias_sc, t, dt, raw)
        if elapsed > 0.5 * startup:
            tmp = JS[J_TMP]
            for j in range(nv):
                tmp[j] = raw[j] + bias[j]
            if _gather_quiet(S, JS, dt, tmp) >= S[PS_LEARN_INTERVAL]:
                _learn_noise(S, JS, 4.0 * S[PS_NOISE_TC] / max(startup, 1e-3))
    else:
        contact_level, contact_event = contact_step(contact_rows, contact_sc, t, residual)
        if contact_event == EVENT_BEGIN:
            event = EV_BEGIN
        elif contact_event == EVENT_END:
            event = EV_END
        if contact_sc[CM_IN_CONTACT] != 0.0:
            phase = PHASE_CONTACT
        else:
            phase = PHASE_FREE
            # learn only from quiet free motion: a residual above the exit level may be a
            # contact building up, and must not be learned as bias or noise; nor right after a
            # contact ended (it may resume: a held object's force passing through zero)
            pending = contact_sc[CM_PENDING] == contact_sc[CM_PENDING]
            if (not pending and contact_level < contact_sc[CM_EXIT]
                    and t - S[PS_CONTACT_END] > S[PS_FORGET_AFTER]):
                bias_update(bias, bias_sc, t, dt, raw)
                for j in range(nv):
                    residual[j] = raw[j] + bias[j]
                if _gather_quiet(S, JS, dt, residual) >= S[PS_LEARN_INTERVAL]:
                    _learn_noise(S, JS, 1.0)
            elif S[PS_QUIET_COUNT] > 0.0:
                # quiet no more (a contact may be building up): learn the samples gathered so
                # far at once, as a per-sample average would have, before judging more
                _learn_noise(S, JS, 1.0)

    # wrench at the contact point
    weights = contact_weights(contact_rows, contact_sc)
    full = S[PS_FULL_WRENCH] != 0.0
    condition = wrench_solve(out[O_FORCE:O_FORCE + 6], J, residual, weights, full,
                             S[PS_DAMPING2])
    f0, f1, f2 = out[O_FORCE], out[O_FORCE + 1], out[O_FORCE + 2]
    check = f0 + f1 + f2
    if full:
        check += out[3] * out[3] + out[4] * out[4] + out[5] * out[5]
    if not math.isfinite(check):
        return STEP_NON_FINITE_WRENCH

    # direction and the projections on it
    pv0 = J[0, 0] * v[0]
    pv1 = J[1, 0] * v[0]
    pv2 = J[2, 0] * v[0]
    for j in range(1, nv):
        pv0 += J[0, j] * v[j]
        pv1 += J[1, j] * v[j]
        pv2 += J[2, j] * v[j]
    point_velocity = np.empty(3)
    point_velocity[0], point_velocity[1], point_velocity[2] = pv0, pv1, pv2
    d = S[S_DIRECTION:S_DIRECTION + DIRECTION_SIZE]
    direction_update(d, dt, H[:3, :3], point_velocity)
    u0, u1, u2 = d[DI_U], d[DI_U + 1], d[DI_U + 2]
    force_along = u0 * f0 + u1 * f1 + u2 * f2
    p0, p1, p2 = H[0, 3], H[1, 3], H[2, 3]
    dx = 0.0
    if S[PS_POINT_VALID] != 0.0:
        dx = u0 * (p0 - S[PS_POINT]) + u1 * (p1 - S[PS_POINT + 1]) + u2 * (p2 - S[PS_POINT + 2])
    S[PS_POINT], S[PS_POINT + 1], S[PS_POINT + 2] = p0, p1, p2
    S[PS_POINT_VALID] = 1.0
    velocity_along = u0 * pv0 + u1 * pv1 + u2 * pv2

    # kinematics along u and the environment filter
    out[O_UPDATED] = 0.0
    out[O_REGAINED] = 0.0
    out[O_CHANGE] = 0.0
    position_along = acceleration_along = lag = 0.0
    if kin[KI_READY] != 0.0:
        if event == EV_BEGIN:
            if S[PS_EVER_CONTACT] == 0.0 or t - S[PS_CONTACT_END] > S[PS_FORGET_AFTER]:
                # a new contact: x from where the residual last was quiet (the contact began
                # there, before the monitor could tell); estimates uncertain again
                kinematics_start_contact(KB, kin, S[PS_QUIET_POSITION])
                if S[PS_EVER_CONTACT] != 0.0:
                    filter_inflate(fst, fcf, CHANGE_REGAINED)
                    out[O_REGAINED] = 1.0
            else:
                event = EV_RESUMED
            S[PS_EVER_CONTACT] = 1.0
        kinematics_push(KB, kin, t, dx, velocity_along, force_along)
        if phase != PHASE_CONTACT:
            if contact_level < contact_sc[CM_EXIT]:
                S[PS_QUIET_POSITION] = kin[KI_POSITION]
        else:
            row = out[O_ROW:O_ROW + 6]
            if kinematics_aligned_row(KB, kin, dt, row):
                code = filter_update(fst, fcf, W, fo, row[5], row[0], row[1], row[2], row[3],
                                     row[4])
                if code != UPDATED:
                    out[O_UPDATED] = code
                    return STEP_FILTER_REFUSED
                out[O_UPDATED] = 1.0
                out[O_CHANGE] = fo[EO_CHANGE]
                out[O_CHANGE_G] = fo[EO_CHANGE_G]
                if fo[EO_CHANGE] != 0.0:
                    event = EV_CHANGE
        position_along = kin[KI_POSITION]
        acceleration_along = kin[KI_ACC]
        lag = kin[KI_HALF] * kin[KI_NOMINAL_DT]
    if event == EV_END:
        S[PS_CONTACT_END] = t

    S[PS_T_PREV] = t
    if dt > 0.0:
        dt_avg = S[PS_DT_AVG]
        S[PS_DT_AVG] = dt if dt_avg == 0.0 else dt_avg + 0.01 * (dt - dt_avg)
    rate = 1.0 / S[PS_DT_AVG] if S[PS_DT_AVG] > 0.0 else 0.0

    # the output row
    for r in range(3):
        out[O_DIRECTION + r] = d[DI_U + r]
    out[O_FORCE_ALONG] = force_along
    out[O_POSITION_ALONG] = position_along
    out[O_VELOCITY_ALONG] = velocity_along
    out[O_ACCELERATION_ALONG] = acceleration_along
    samples = fst[EF_SAMPLES]
    if samples == 0.0:   # no update since the last reset: the prior
        for i in range(4):
            out[O_PARAMETERS + i] = S[PS_PRIOR_MEAN + i]
            out[O_STD + i] = S[PS_PRIOR_STD + i]
        out[O_NIS] = out[O_NIS_AVERAGE] = out[O_NIS_LO] = 0.0
        out[O_NIS_HI] = math.inf
        out[O_MEASUREMENT_STD] = S[PS_PRIOR_MEASUREMENT_STD]
        pattern = 0
    else:
        for i in range(4):
            out[O_PARAMETERS + i] = fo[EO_THETA + i]
            out[O_STD + i] = fo[EO_STD + i]
        out[O_NIS] = fo[EO_NIS]
        out[O_NIS_AVERAGE] = fo[EO_NIS_AVERAGE]
        out[O_NIS_LO] = fo[EO_NIS_LO]
        out[O_NIS_HI] = fo[EO_NIS_HI]
        out[O_MEASUREMENT_STD] = math.sqrt(fo[EO_R])
        pattern = int(fo[EO_PATTERN])
        samples = fo[EO_SAMPLES]
    if phase != PHASE_CONTACT:
        pattern &= 15
    out[O_CONTACT_LEVEL] = contact_level
    out[O_CONDITION] = condition
    out[O_RATE] = rate
    out[O_LAG] = lag
    last = bias_sc[BI_LAST]
    out[O_BIAS_AGE] = math.inf if last != last else t - last
    out[O_PHASE] = phase
    out[O_EVENT] = event
    out[O_PATTERN] = pattern
    out[O_FILTER_SAMPLES] = samples
    out[O_STARTUP_REMAINING] = startup - elapsed if elapsed < startup else 0.0
    out[O_SINCE_CONTACT_END] = (t - S[PS_CONTACT_END] if S[PS_EVER_CONTACT] != 0.0
                                else math.inf)
    out[O_RESTARTS] = obs[OB_RESTARTS]
    for j in range(nv):
        out[OUT_FIXED + j] = residual[j]
        out[OUT_FIXED + nv + j] = bias[j]
        out[OUT_FIXED + 2 * nv + j] = raw[j]
    level, state, findings = health_verdict(
        phase, out[O_SINCE_CONTACT_END], pattern, out[O_NIS_AVERAGE], out[O_NIS_LO],
        out[O_NIS_HI], samples, condition, S[PS_RECENT_REJECTS], rate,
        S[PS_FROM_RECEIVE] != 0.0, S[PS_CONDITION_LIMIT], S[PS_MIN_RATE], S[PS_STALE_AFTER])
    out[O_LEVEL] = level
    out[O_STATE] = state
    out[O_FINDINGS] = findings
    return STEP_DONE


@kernel
def pipeline_run(S, JS, P3, KB, W, OUT, start, T, Q, V, E, M, C, G, J, H, FROM_RECEIVE,
                 REJECT_TIMES):
    """:func:`pipeline_step` on samples ``start``, ``start`` + 1, ... of a block (row i of
    each array: sample i; OUT row i its output row; FROM_RECEIVE (k,) 1 where a stamp is the
    receive time), until the block ends or a step does not return STEP_DONE. REJECT_TIMES:
    the stamps, s, of the samples rejected before ``start`` (ascending), from which each
    sample's count of rejects over the second before it is taken.

    Returns (index, code): the first sample whose step returned ``code`` != STEP_DONE, or
    (k, STEP_DONE) when every sample from ``start`` on was done."""
    k = T.shape[0]
    first = 0
    m = REJECT_TIMES.shape[0]
    for i in range(start, k):
        t = T[i]
        while first < m and REJECT_TIMES[first] < t - 1.0:
            first += 1
        S[PS_RECENT_REJECTS] = m - first
        S[PS_FROM_RECEIVE] = FROM_RECEIVE[i]
        code = pipeline_step(S, JS, P3, KB, W, OUT[i], t, Q[i], V[i], E[i], M[i], C[i], G[i],
                             J[i], H[i])
        if code != STEP_DONE:
            return i, code
    return k, STEP_DONE
