"""Bad samples through the whole Pipeline: refused by reason, counted, and leaving no trace.

Contract of the project (DESIGN.md section 2 and the README's list of rejected samples; no
outside source): a sample with a non-finite number, arrays of the wrong length, no efforts, a
joint the model lacks, or a stamp not after the last valid one is refused with its reason and
counted, and the estimates afterwards are exactly those of a run that never saw it (the health
verdict then also says that samples were rejected in the last second).
"""
import math

import numpy as np
import pytest

from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import Sample
from interaction_estimator.core.settings import Settings
from interaction_estimator.sim import marten


def motion(n: int, names: tuple[str, ...]):
    """Invented Marten motion at 1 kHz with a constant push on the efforts from 0.3 s."""
    rest = np.array([0, 0, 0, 0.1, 0.5, 0.0, 1.2, 0.0, 0.6, 0.0])
    out = []
    for k in range(n):
        t = 1.0 + k * 1e-3
        ang = rest + 0.05 * np.sin(3.0 * t + np.arange(10))
        vel = 0.15 * np.cos(3.0 * t + np.arange(10))
        eff = np.full(10, 2.0 if k > 300 else 0.0)
        out.append(Sample(t, names, ang, vel, eff))
    return out


BAD = {
    "non_finite": lambda s: Sample(s.time + 5e-4, s.names, np.where(np.arange(10) == 3, np.nan,
                                                                  s.position),
                                   s.velocity, s.effort),
    "non_finite_effort": lambda s: Sample(s.time + 5e-4, s.names, s.position, s.velocity,
                                          np.where(np.arange(10) == 7, np.inf, s.effort)),
    "length_mismatch": lambda s: Sample(s.time + 5e-4, s.names, s.position[:9], s.velocity,
                                        s.effort),
    "missing_effort": lambda s: Sample(s.time + 5e-4, s.names, s.position, s.velocity,
                                       np.zeros(0)),
    "unknown_joint": lambda s: Sample(s.time + 5e-4, ("gripper",) + s.names[1:], s.position,
                                      s.velocity, s.effort),
    "duplicate_time": lambda s: s,
    "time_backwards": lambda s: Sample(s.time - 0.5, s.names, s.position, s.velocity,
                                       s.effort),
}


@pytest.mark.parametrize("kind", sorted(BAD))
def test_bad_sample_is_refused_counted_and_leaves_no_trace(kind):
    urdf = marten.mobile_urdf()
    clean, dirty = Pipeline(Settings(), urdf), Pipeline(Settings(), urdf)
    samples = motion(800, clean.model.joint_names)
    reason = "non_finite" if kind.startswith("non_finite") else kind
    for k, s in enumerate(samples):
        a = clean.process(s)
        b = dirty.process(s)
        np.testing.assert_array_equal(a.force, b.force)
        np.testing.assert_array_equal(a.parameters, b.parameters)
        np.testing.assert_array_equal(a.parameter_std, b.parameter_std)
        np.testing.assert_array_equal(a.external_torque, b.external_torque)
        assert a.state == b.state   # the level and message also report the recent rejects
        if k % 97 == 50:
            before = dirty.rejects.total
            assert dirty.process(BAD[kind](s)) is None
            assert dirty.rejects.total == before + 1
            assert dirty.rejects.last_reason == reason, dirty.rejects.last_message
            assert dirty.rejects.counts[reason] >= 1
    assert clean.rejects.total == 0 and dirty.rejects.total == 8
    assert math.isfinite(float(np.sum(dirty.process(
        Sample(samples[-1].time + 1e-3, *[getattr(samples[-1], f) for f in
                                           ("names", "position", "velocity", "effort")]))
        .force)))


def test_messages_name_the_bad_value():
    urdf = marten.mobile_urdf()
    pipe = Pipeline(Settings(), urdf)
    s = motion(3, pipe.model.joint_names)
    assert pipe.process(s[0]) is not None
    pipe.process(BAD["non_finite"](s[1]))
    assert "position of joint" in pipe.rejects.last_message
    assert repr(pipe.model.joint_names[3]) in pipe.rejects.last_message
    pipe.process(BAD["time_backwards"](s[1]))
    assert "older than the previous" in pipe.rejects.last_message
    pipe.process(s[0])
    assert pipe.rejects.last_reason == "duplicate_time"
    pipe.process(BAD["unknown_joint"](s[1]))
    assert "lacks model joints" in pipe.rejects.last_message
