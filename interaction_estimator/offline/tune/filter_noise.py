"""The environment filter's noise from contact: decimated maximum likelihood of its innovations
(process noise) and covariance matching (measurement noise)."""
from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from ...core.environment import PARAMETER_NAMES, EnvironmentFilter
from ...core.settings import SPEC_BY_NAME, Settings
from .common import (
    CHI2_1_95,
    DECIMATION_OFFSETS,
    MATCH_TOLERANCE,
    MAX_DECIMATION,
    MIN_DECIMATED_UPDATES,
    MIN_EXCITED_FRACTION,
    SEARCH_DECADES,
    SEARCH_SWEEPS,
    WHITE_CORRELATION,
    Z95,
    _clamp,
)
from .friction import correlation_lags
from .passes import FilterTape
from .segments import steady_mask

# ============================================================================================
# environment-filter noise: decimated maximum likelihood and covariance matching


@dataclass
class NoiseFit:
    """Environment-filter noise identified from contact.

    measurement_std N with its 95 % interval (from the sampling error of the mean NIS);
    process_std (4,) [kg/√s, N·s/m/√s, N/m/√s, N/√s] with 95 % intervals (4, 2) (likelihood
    ratio); tuned (4,) bool: changed from the base; notes (4,): why a value was kept or bounded;
    excited_fraction (4,); updates: filter updates used; contact_time s; decimation: every
    how many updates the likelihood used; innovation_correlation: lag-1 autocorrelation of the
    full-rate innovations at the base values; nis_base, nis_tuned: mean NIS over the updates at
    the base and at the tuned values (fixed noise); evaluations: filter re-runs made."""

    measurement_std: float
    measurement_interval: tuple[float, float]
    process_std: np.ndarray
    process_interval: np.ndarray
    tuned: np.ndarray
    notes: list[str]
    excited_fraction: np.ndarray
    updates: int
    contact_time: float
    decimation: int
    innovation_correlation: float
    nis_base: float
    nis_tuned: float
    evaluations: int
    per_bag_std: list[float] = field(default_factory=list)
    onset: float = 0.0


@dataclass
class _FilterRun:
    """Per-update results of a re-run: innovation y N, its variance S N^2, NIS, bag index,
    excited (M, 4) bool as the filter judged it."""

    innovation: np.ndarray
    variance: np.ndarray
    nis: np.ndarray
    bag: np.ndarray
    excited: np.ndarray

    def nll_of(self, mask: np.ndarray) -> float:
        """Negative log-likelihood 1/2 sum(log S + y^2/S) (Gaussian innovations) over the
        updates selected by ``mask`` (M,) bool."""
        return 0.5 * float(np.sum((np.log(self.variance) + self.nis)[mask]))

    def subset(self, mask: np.ndarray) -> _FilterRun:
        return _FilterRun(self.innovation[mask], self.variance[mask], self.nis[mask],
                          self.bag[mask], self.excited[mask])


class FilterPool:
    """Reusable EnvironmentFilter objects: building one computes its chi-square table, which
    costs more than a short re-run; :meth:`get` applies new settings and resets instead."""

    def __init__(self) -> None:
        self._filters: dict[int, EnvironmentFilter] = {}

    def get(self, slot: int, settings: Settings) -> EnvironmentFilter:
        filt = self._filters.get(slot)
        if filt is None:
            filt = self._filters[slot] = EnvironmentFilter(settings)
        else:
            filt.update_settings(settings)
            filt.reset("tuning re-run")
        return filt


def replay_filter(tapes: Sequence[FilterTape], settings: Settings,
                  pool: FilterPool | None = None, slot: int = 0) -> _FilterRun:
    """Re-run the package's EnvironmentFilter on recorded inputs: a filter in its start state per
    bag, as the Pipeline starts one, inflations where the Pipeline made them."""
    pool = pool or FilterPool()
    ys, ss, bags, exc = [], [], [], []
    for b, tape in enumerate(tapes):
        filt = pool.get(slot * 1000 + b, settings)
        infl: dict[int, list[str]] = {}
        for i, reason in tape.inflations:
            infl.setdefault(i, []).append(reason)
        for k in range(len(tape)):
            for reason in infl.get(k, ()):
                filt.inflate(reason)
            step = filt.update(tape.time[k], tape.rows[k], tape.force[k])
            ys.append(step.innovation)
            ss.append(step.innovation_var)
            bags.append(b)
            exc.append(step.excited)
    y, s = np.array(ys), np.array(ss)
    return _FilterRun(y, s, y * y / s, np.array(bags), np.array(exc, bool).reshape(-1, 4))


def decimate(tape: FilterTape, every: int, offset: int) -> FilterTape:
    """Every ``every``-th update from ``offset`` (the filter then steps over every-times longer
    intervals; inflations move to the next kept update)."""
    idx = np.arange(offset, len(tape), every)
    pos = [(int(np.searchsorted(idx, i)), r) for i, r in tape.inflations]
    return FilterTape([tape.time[i] for i in idx], [tape.rows[i] for i in idx],
                      [tape.force[i] for i in idx], [tape.excited[i] for i in idx], pos)


def innovation_autocorrelation(run: _FilterRun, lags: int) -> np.ndarray:
    """Autocorrelation (lags + 1,) of the normalized innovations y/sqrt(S), within bags."""
    z = run.innovation / np.sqrt(run.variance)
    out = np.ones(lags + 1)
    var = float(np.mean(z * z))
    for lag in range(1, lags + 1):
        same = run.bag[lag:] == run.bag[:-lag]
        if same.sum() < 10 or var <= 0:
            return out[:lag]
        out[lag] = float(np.mean(z[lag:][same] * z[:-lag][same])) / var
    return out


class _Objective:
    """Noise settings from log-parameters, and the filter re-runs that evaluate them."""

    def __init__(self, tapes: Sequence[FilterTape], base: Settings, free: np.ndarray,
                 onset: float = 0.0):
        self.tapes = list(tapes)
        self.free = free
        self.steady = [steady_mask(t, onset) for t in self.tapes]
        self.steady_all = (np.concatenate(self.steady) if self.steady
                           else np.zeros(0, bool))
        self.steady_decimated: list[np.ndarray] = []
        q = np.array(base["filter.process_std"], float)
        self.q_ref = np.where(q > 0, q, np.array(SPEC_BY_NAME["filter.process_std"].default))
        # the fit runs the filter as configured, with fixed (not adapted) noise
        self.base = base.replace({"filter.noise_adaptation": "fixed",
                                  "filter.process_adaptation": "fixed"})
        self.evaluations = 0
        self.decimated: list[list[FilterTape]] = []
        self.pool = FilterPool()

    def settings(self, log_r: float, log_q: np.ndarray) -> Settings:
        q = self.q_ref.copy()
        q[self.free] = np.exp(log_q)
        return self.base.replace({"filter.measurement_std": _clamp("filter.measurement_std",
                                                                   math.exp(log_r)),
                                  "filter.process_std": [_clamp("filter.process_std", float(v))
                                                         for v in q]})

    def full(self, log_r: float, log_q: np.ndarray) -> _FilterRun:
        self.evaluations += 1
        return replay_filter(self.tapes, self.settings(log_r, log_q), self.pool, 0)

    def set_decimation(self, every: int, offsets: int) -> None:
        offs = sorted({int(round(i * every / offsets)) for i in range(offsets)})
        self.decimated = [[decimate(t, every, o) for t in self.tapes] for o in offs]
        self.steady_decimated = [np.concatenate([m[o::every] for m in self.steady])
                                 for o in offs]

    def decimated_nll(self, x: np.ndarray) -> float:
        """Mean over the offsets of the decimated filter's negative log-likelihood."""
        s = self.settings(float(x[0]), np.asarray(x[1:]))
        self.evaluations += len(self.decimated)
        return float(np.mean([replay_filter(d, s, self.pool, i + 1).nll_of(m)
                              for i, (d, m) in enumerate(zip(self.decimated,
                                                             self.steady_decimated))]))


def choose_decimation(run: _FilterRun, updates: int) -> int:
    """Smallest lag at which the normalized innovations' autocorrelation falls below
    :data:`WHITE_CORRELATION`, limited so that :data:`MIN_DECIMATED_UPDATES` remain."""
    limit = max(1, min(MAX_DECIMATION, updates // MIN_DECIMATED_UPDATES))
    acf = innovation_autocorrelation(run, limit)
    below = np.flatnonzero(np.abs(acf) < WHITE_CORRELATION)
    return int(below[0]) if len(below) else limit


def fit_filter_noise(tapes: Sequence[FilterTape], base: Settings, onset: float = 0.0
                     ) -> NoiseFit:
    """Measurement and process noise of the environment filter from its recorded inputs.

    1. Pilot: the filter at the base noise; the autocorrelation of its normalized innovations
       sets the decimation m (they are far from white at the sample rate: the force comes from
       the momentum observer and the acceleration from a smoothing differentiator).
    2. Process noise: maximum of the likelihood of the filter run on every m-th update (whose
       innovations are close to white), averaged over several offsets, over the logarithms of
       the measurement std and of the excited parameters' process std (bounded Brent searches,
       one coordinate at a time, :data:`SEARCH_SWEEPS` sweeps). A process noise intensity per
       second does not depend on the rate, so the value carries over.
    3. Measurement noise: covariance matching at the full rate (Mehra, IEEE TAC 1972): the value
       at which the filter's mean normalized innovation squared over the data is 1, the
       condition its NIS consistency test checks (Bar-Shalom, Li and Kirubarajan 2001).

    The filter runs over every update, but the first ``onset`` s of each contact (see
    :func:`onset_time`) count neither in the likelihood nor in the matching.
    """
    updates = sum(len(t) for t in tapes)
    contact_time = sum(float(t.time[-1] - t.time[0]) for t in tapes if len(t) > 1)
    obj = _Objective(tapes, base, np.ones(4, bool), onset)
    q_base = np.array(base["filter.process_std"], float)
    r0 = math.log(float(base["filter.measurement_std"]))
    pilot = obj.full(r0, np.log(obj.q_ref))
    frac = pilot.excited.mean(axis=0)       # excitation as the filter judges it
    free = frac >= MIN_EXCITED_FRACTION
    obj.free = free
    lq0 = np.log(obj.q_ref[free])
    every = choose_decimation(pilot, updates)
    obj.set_decimation(every, min(DECIMATION_OFFSETS, every))
    x0 = np.r_[r0, lq0]
    span = SEARCH_DECADES * math.log(10.0)
    lower = x0 - span
    lower[0] = max(lower[0], math.log(max(float(base["filter.measurement_std_floor"]), 1e-6)))
    upper = x0 + span

    x = _coordinate_search(obj.decimated_nll, x0, lower, upper)
    best = float(obj.decimated_nll(x))
    q_out, q_int, tuned, notes = q_base.copy(), np.full((4, 2), np.nan), np.zeros(4, bool), [""] * 4
    for k, i in enumerate(np.flatnonzero(free)):
        lo, hi = _likelihood_interval(obj, x, k + 1, best, lower[k + 1], upper[k + 1])
        q_out[i], q_int[i], tuned[i], notes[i] = _process_decision(
            PARAMETER_NAMES[i], math.exp(x[k + 1]), lo, hi, q_base[i])
    for i in np.flatnonzero(~free):
        notes[i] = (f"excited in only {100 * frac[i]:.0f} % of the contact updates (needs "
                    f"{100 * MIN_EXCITED_FRACTION:g} %): the data say nothing about how fast "
                    f"{PARAMETER_NAMES[i].replace('_', ' ')} changes; base value kept")
    lq_final = np.log(np.where(q_out > 0, q_out, obj.q_ref)[free])
    r_std, r_int, nis_tuned, per_bag = _match_measurement_noise(obj, x[0], lq_final)
    nis_base = float(np.mean(pilot.nis[obj.steady_all]))
    rho = float(innovation_autocorrelation(pilot, 1)[-1])
    return NoiseFit(r_std, r_int, q_out, q_int, tuned, notes, frac, updates, contact_time,
                    every, rho, nis_base, nis_tuned, obj.evaluations, per_bag, onset)


def _coordinate_search(f: Callable[[np.ndarray], float], x0: np.ndarray, lower: np.ndarray,
                       upper: np.ndarray) -> np.ndarray:
    """Minimize f over the box [lower, upper] one coordinate at a time (bounded Brent,
    scipy.optimize.minimize_scalar), :data:`SEARCH_SWEEPS` sweeps. Robust to the small jumps
    the filter's change detection puts into the likelihood, and cheap in evaluations."""
    from scipy.optimize import minimize_scalar

    x = np.array(x0, float)
    for _ in range(SEARCH_SWEEPS):
        for k in range(len(x)):
            def along(v: float, k: int = k) -> float:
                y = x.copy()
                y[k] = v
                return f(y)
            res = minimize_scalar(along, bounds=(lower[k], upper[k]), method="bounded",
                                  options={"xatol": 0.1, "maxiter": 14})
            if res.fun < f(x):
                x[k] = res.x
    return x


def _likelihood_interval(obj: _Objective, x: np.ndarray, k: int, best: float, lo_bound: float,
                         hi_bound: float) -> tuple[float, float]:
    """95 % likelihood-ratio interval of exp(x[k]) with the other values held at the optimum
    (2 dNLL <= chi-square(1) 95 %); an end that reaches the search bound is nan."""
    def excess(v: float) -> float:
        y = x.copy()
        y[k] = v
        return 2.0 * (obj.decimated_nll(y) - best) - CHI2_1_95

    ends = []
    for bound, step in ((lo_bound, -1.0), (hi_bound, 1.0)):
        inside, outside = x[k], None
        v = x[k]
        while outside is None:
            v = v + step * 1.15
            if (step < 0 and v <= bound) or (step > 0 and v >= bound):
                if excess(bound) <= 0:
                    break
                outside = bound
            elif excess(v) > 0:
                outside = v
            else:
                inside = v
        if outside is None:
            ends.append(math.nan)
            continue
        for _ in range(4):
            mid = 0.5 * (inside + outside)
            if excess(mid) > 0:
                outside = mid
            else:
                inside = mid
        ends.append(math.exp(inside))
    return ends[0], ends[1]


def _process_decision(name: str, best: float, lo: float, hi: float,
                      q_base: float) -> tuple[float, tuple[float, float], bool, str]:
    """Which process std to write, given the estimate and its likelihood interval."""
    label = name.replace("_", " ")
    if math.isfinite(lo) and math.isfinite(hi):
        return best, (lo, hi), True, ""
    if not math.isfinite(hi):
        return q_base, (lo, math.nan), False, (
            f"the likelihood does not bound the process noise of {label} from above: base "
            "value kept")
    # flat towards zero: the data show no change of this parameter
    if 0.0 < q_base <= hi:
        return q_base, (0.0, hi), False, (
            f"the data show no change of {label} and accept any value up to {hi:.3g}, the base "
            "value included: kept")
    return hi, (0.0, hi), True, (
        f"the data show no change of {label} and reject the base value {q_base:g} "
        "(likelihood ratio, 95 %): written as the largest value they accept")


def _match_measurement_noise(obj: _Objective, log_r0: float, log_q: np.ndarray
                             ) -> tuple[float, tuple[float, float], float, list[float]]:
    """Measurement std at which the full-rate mean NIS is 1, its 95 % interval from the
    Newey-West standard error of that mean, the mean NIS reached, and the value each bag
    alone would match (from its own mean NIS and the local slope).

    Secant iterations on log(mean NIS) against log R (nearly linear, slope about -2 where R
    dominates S), from the decimated fit's value; stops within :data:`MATCH_TOLERANCE`."""
    runs: dict[float, _FilterRun] = {}

    def log_nis(lr: float) -> float:
        if lr not in runs:
            runs[lr] = obj.full(lr, log_q).subset(obj.steady_all)
        return math.log(max(float(np.mean(runs[lr].nis)), 1e-300))

    a, fa = log_r0, log_nis(log_r0)
    b = a + 0.5 * fa      # first step with slope -2
    fb = log_nis(b)
    for _ in range(8):
        if abs(fb) < MATCH_TOLERANCE:
            break
        slope = (fb - fa) / (b - a) if b != a else -2.0
        slope = slope if slope < -0.05 else -2.0
        a, fa = b, fb
        b = b - fb / slope
        fb = log_nis(b)
    best = min(runs, key=lambda lr: abs(log_nis(lr)))
    run = runs[best]
    others = [lr for lr in runs if lr != best]
    near = min(others, key=lambda lr: abs(lr - best)) if others else best + 0.2
    slope = (log_nis(near) - log_nis(best)) / (near - best) if near != best else -2.0
    slope = slope if slope < -0.05 else -2.0
    nis = run.nis
    centred = nis - nis.mean()
    lags = correlation_lags(centred, run.bag, 2000)
    se = math.sqrt(max(_long_run(centred[:, None], run.bag, lags)[0, 0], 0.0)) / len(nis)
    half = Z95 * (se / max(float(nis.mean()), 1e-12)) / abs(slope)
    r = math.exp(best)
    per_bag = [r * float(np.mean(nis[run.bag == b])) ** (1.0 / abs(slope))
               if np.any(run.bag == b) else math.nan for b in range(len(obj.tapes))]
    return r, (r * math.exp(-half), r * math.exp(half)), float(np.mean(nis)), per_bag


def _long_run(G: np.ndarray, run_id: np.ndarray, lags: int) -> np.ndarray:
    """Newey-West long-run covariance (sum, not mean) of rows G (M, p), within bags."""
    S = G.T @ G
    for lag in range(1, lags + 1):
        same = run_id[lag:] == run_id[:-lag]
        if not same.any():
            break
        C = G[lag:][same].T @ G[:-lag][same]
        S += (1.0 - lag / (lags + 1.0)) * (C + C.T)
    return S


