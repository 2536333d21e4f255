"""The node's input helpers without ROS: stamp matching and throttled warnings.

Reference: the matching rule as documented in EffortMatcher (a state pairs with the effort
closest in stamp within the tolerance; states that can no longer pair come out with None), applied
by hand to short sequences; a fake clock for the throttle.
"""
from __future__ import annotations

from types import SimpleNamespace

import numpy as np

from interaction_estimator.node_inputs import EffortMatcher, LatencyMeter, WarningThrottle
from interaction_estimator.node_messages import outputs_finite


def pairs(out):
    return [(p.time, p.state, p.effort) for p in out]


def test_pairs_whichever_arrives_first():
    m = EffortMatcher(tolerance_s=0.0005)
    assert m.add_state(1.000, "s1") == []
    assert pairs(m.add_effort(1.0003, "e1")) == [(1.000, "s1", "e1")]
    assert m.add_effort(1.002, "e2") == []
    assert pairs(m.add_state(1.002, "s2")) == [(1.002, "s2", "e2")]
    assert m.pending() == 0 and m.unused_efforts == 0


def test_state_without_effort_is_given_up_when_a_newer_effort_arrives():
    m = EffortMatcher(tolerance_s=0.0005)
    m.add_state(1.000, "s1")
    m.add_state(1.002, "s2")
    # the effort of s2 arrives: s1 can no longer get one (efforts come in stamp order)
    assert pairs(m.add_effort(1.002, "e2")) == [(1.000, "s1", None), (1.002, "s2", "e2")]
    m.add_state(1.004, "s3")
    assert pairs(m.add_effort(1.010, "e5")) == [(1.004, "s3", None)]  # 6 ms later: too far


def test_unusable_efforts_are_counted_and_buffers_are_bounded():
    m = EffortMatcher(tolerance_s=0.0005, capacity=3)
    for k in range(5):
        m.add_effort(1.0 + 0.002 * k, f"e{k}")
    assert m.unused_efforts == 2                        # capacity 3: the two oldest dropped
    assert pairs(m.add_state(1.008, "s4")) == [(1.008, "s4", "e4")]
    assert m.unused_efforts == 4                        # e2, e3 older than the matched e4
    out = [p for k in range(5) for p in m.add_state(2.0 + 0.002 * k, f"t{k}")]
    assert pairs(out) == [(2.0, "t0", None), (2.002, "t1", None)]
    assert m.pending() == 3


def test_throttle_reports_once_per_period_with_the_count_in_between():
    now = [0.0]
    lines: list[str] = []
    t = WarningThrottle(lines.append, period_s=2.0, clock=lambda: now[0])
    assert t.emit("non_finite", "first")
    for _ in range(5):
        now[0] += 0.1
        assert not t.emit("non_finite", "again")
    assert t.emit("other", "independent key")
    now[0] = 2.5
    assert t.emit("non_finite", "later")
    assert lines == ["first", "independent key", "later (and 5 more like it in the last 2.5 s)"]


def test_latency_meter_mean_and_max():
    m = LatencyMeter(memory=1)
    for x in (0.001, 0.003, 0.002):
        m.add(x)
    assert m.mean_s == 0.002 and m.take_max() == 0.003 and m.take_max() == 0.0


def test_outputs_finite_agrees_with_numpy_isfinite():
    """Reference: numpy.isfinite over every number the wrench and environment messages carry."""
    rng = np.random.default_rng(7)
    for case in range(400):
        arrays = [rng.normal(scale=10.0 ** rng.integers(-3, 6), size=n) for n in (3, 3, 4, 4)]
        if case % 2:  # one bad value somewhere
            a = arrays[rng.integers(4)]
            a[rng.integers(len(a))] = (np.nan, np.inf, -np.inf)[case % 3]
        est = SimpleNamespace(force=arrays[0], torque=arrays[1], parameters=arrays[2],
                              parameter_std=arrays[3])
        assert outputs_finite(est) == bool(np.isfinite(np.concatenate(arrays)).all()), case
    # a finite sum that overflows counts as non-finite (documented: errs on the safe side)
    est = SimpleNamespace(force=np.full(3, 1e308), torque=np.zeros(3), parameters=np.zeros(4),
                          parameter_std=np.zeros(4))
    assert not outputs_finite(est)
