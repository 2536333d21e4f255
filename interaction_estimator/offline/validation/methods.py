"""The three methods a run is scored on: the estimator, a batch least-squares fit of the same
contact's data, and a naive recursive least squares.

The estimator is used through its public API only: ``Pipeline(settings, urdf)``,
``Pipeline.process(sample)`` per joint state, and ``Pipeline.filter_input()`` for the rows its
object filter was updated with (the force along u and the regressor [x'', x', x, 1] of its own
kinematics, aligned in time). The batch fit and the recursive one use those rows: they get
exactly the information the estimator's filter gets, so the batch fit is the information limit
given the estimator's own force and kinematics.
"""
from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

N_PARAMETERS = 4


@dataclass
class Trace:
    """Per-sample outputs of a method (m samples, in the measured run's sample order).

    time (m,) s; theta, std (m, 4) in kg, N·s/m, N/m, N; converged (m, 4) bool per parameter;
    all_converged (m,) bool. For the estimator also force (m, 3) N, force_along (m,) N,
    excited (m, 4), in_contact (m,), level (m,), state (m,) words, kinematics_lag (m,) s;
    rows: the filter's update rows (k, 6): sample index, centre time s, h (4), and f (N) in
    ``rows_f``. NaN where a method has no estimate yet."""

    time: np.ndarray
    theta: np.ndarray
    std: np.ndarray
    converged: np.ndarray
    all_converged: np.ndarray
    force: np.ndarray | None = None
    force_along: np.ndarray | None = None
    excited: np.ndarray | None = None
    in_contact: np.ndarray | None = None
    level: np.ndarray | None = None
    state: np.ndarray | None = None
    kinematics_lag: np.ndarray | None = None
    rows_index: np.ndarray | None = None
    rows_time: np.ndarray | None = None
    rows_h: np.ndarray | None = None
    rows_f: np.ndarray | None = None
    rejected: int = 0


def run_estimator(measured, urdf: str, settings) -> Trace:
    """Feed every measured sample to a new Pipeline; collect its outputs and filter rows."""
    from ...core.pipeline import Pipeline
    from ...core.samples import Sample
    pipe = Pipeline(settings, urdf)
    m = len(measured.time)
    theta = np.full((m, N_PARAMETERS), np.nan)
    std = np.full((m, N_PARAMETERS), np.nan)
    conv = np.zeros((m, N_PARAMETERS), bool)
    excited = np.zeros((m, N_PARAMETERS), bool)
    allconv = np.zeros(m, bool)
    force = np.full((m, 3), np.nan)
    along = np.full(m, np.nan)
    contact = np.zeros(m, bool)
    level = np.full(m, -1, np.int8)
    state = np.empty(m, dtype=object)
    lag = np.full(m, np.nan)
    rows_i, rows_t, rows_h, rows_f = [], [], [], []
    names = measured.names
    T, Q, V, E = measured.time, measured.position, measured.velocity, measured.effort
    for k in range(m):
        e = pipe.process(Sample(float(T[k]), names, Q[k], V[k], E[k]))
        if e is None:
            state[k] = "rejected"
            continue
        theta[k] = e.parameters
        std[k] = e.parameter_std
        conv[k] = e.parameter_converged
        excited[k] = e.excited
        allconv[k] = e.converged
        force[k] = e.force
        along[k] = e.force_along
        contact[k] = e.in_contact
        level[k] = e.level
        state[k] = e.state
        lag[k] = e.kinematics_lag
        row = pipe.filter_input()
        if row is not None:
            tc, h, f, _ = row
            rows_i.append(k)
            rows_t.append(tc)
            rows_h.append(h)
            rows_f.append(f)
    return Trace(measured.time, theta, std, conv, allconv, force=force, force_along=along,
                 excited=excited, in_contact=contact, level=level, state=state,
                 kinematics_lag=lag, rows_index=np.array(rows_i, int),
                 rows_time=np.array(rows_t, float),
                 rows_h=np.array(rows_h, float).reshape(-1, N_PARAMETERS),
                 rows_f=np.array(rows_f, float), rejected=pipe.rejects.total)


def batch_fit(h: np.ndarray, f: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Ordinary least squares f ~ h theta by numpy.linalg.lstsq; returns (theta (4,), std (4,))
    with the classical std sqrt(diag(s^2 (H^T H)^-1)), s^2 = RSS / (k - 4) (white residuals
    assumed: it is the textbook figure, not a consistent one for coloured errors).
    NaN when there are fewer than 5 rows."""
    k = len(f)
    if k <= N_PARAMETERS:
        return np.full(N_PARAMETERS, np.nan), np.full(N_PARAMETERS, np.nan)
    theta, _, rank, sv = np.linalg.lstsq(h, f, rcond=None)
    resid = f - h @ theta
    s2 = float(resid @ resid) / (k - N_PARAMETERS)
    with np.errstate(divide="ignore", invalid="ignore"):
        cov = s2 * np.linalg.pinv(h.T @ h)
    return theta, np.sqrt(np.clip(np.diag(cov), 0.0, None))


class NaiveRLS:
    """Plain recursive least squares without forgetting (Ljung, System Identification, 2nd ed.,
    1999, section 11.2), the baseline of issue 17.

    theta_k = theta_{k-1} + K e, K = P h / (1 + h^T P h), P = P - K h^T P, e = f - h^T theta,
    from theta_0 = 0, P_0 = 1e6 I (a prior worth nothing against the data). The residual
    variance s^2 = S / (k - 4), with S accumulated as e^2 / (1 + h^T P h) (the exact recursion
    of the least-squares residual sum); std_i = sqrt(P_ii s^2): white residuals assumed, as a
    naive implementation would. It restarts (theta_0, P_0) when the rows resume after a gap of
    more than ``restart_gap`` s: a new contact.

    Its "converged" verdict (our own rule for the baseline, no source): 3 std_i <= 5 % of
    max(|theta_i|, s_i), s_i = 5 % of the RMS force over the RMS of regressor column i, both
    over the rows since the restart.
    """

    def __init__(self, restart_gap: float = 1.0, p0: float = 1e6):
        self.restart_gap, self.p0 = restart_gap, p0

    def run(self, rows_index, rows_time, rows_h, rows_f, m: int) -> Trace:
        """Outputs per sample of a run with m samples, from the rows (held between rows)."""
        theta_out = np.full((m, N_PARAMETERS), np.nan)
        std_out = np.full((m, N_PARAMETERS), np.nan)
        conv_out = np.zeros((m, N_PARAMETERS), bool)
        theta = np.zeros(N_PARAMETERS)
        P = np.eye(N_PARAMETERS) * self.p0
        S = 0.0
        count = 0
        sum_f2 = 0.0
        sum_h2 = np.zeros(N_PARAMETERS)
        last_t = -math.inf
        for j in range(len(rows_f)):
            t = rows_time[j]
            if t - last_t > self.restart_gap:
                theta[:] = 0.0
                P = np.eye(N_PARAMETERS) * self.p0
                S, count, sum_f2 = 0.0, 0, 0.0
                sum_h2[:] = 0.0
            last_t = t
            h = rows_h[j]
            f = rows_f[j]
            Ph = P @ h
            denom = 1.0 + h @ Ph
            K = Ph / denom
            e = f - h @ theta
            theta = theta + K * e
            P = P - np.outer(K, Ph)
            P = 0.5 * (P + P.T)
            S += e * e / denom
            count += 1
            sum_f2 += f * f
            sum_h2 += h * h
            i = rows_index[j]
            theta_out[i] = theta
            if count > N_PARAMETERS:
                s2 = S / (count - N_PARAMETERS)
                std = np.sqrt(np.clip(np.diag(P), 0.0, None) * s2)
                std_out[i] = std
                with np.errstate(divide="ignore", invalid="ignore"):
                    scale = 0.05 * math.sqrt(sum_f2 / count) / np.sqrt(sum_h2 / count)
                conv_out[i] = 3.0 * std <= 0.05 * np.maximum(np.abs(theta), scale)
        # hold each output until the next row (a restart clears nothing until its first row)
        idx = np.full(m, -1)
        if len(rows_index):
            idx[rows_index] = rows_index
        idx = np.maximum.accumulate(idx)
        have = idx >= 0
        theta_h = np.full((m, N_PARAMETERS), np.nan)
        std_h = np.full((m, N_PARAMETERS), np.nan)
        conv_h = np.zeros((m, N_PARAMETERS), bool)
        theta_h[have] = theta_out[idx[have]]
        std_h[have] = std_out[idx[have]]
        conv_h[have] = conv_out[idx[have]]
        return Trace(np.arange(m, dtype=float), theta_h, std_h, conv_h, conv_h.all(axis=1))
