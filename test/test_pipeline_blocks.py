"""A recording processed a block at a time gives what the node's sample-by-sample path gives.

Contract of the design (DESIGN.md section 2: "for the same input and parameters, node and
replay produce the same numbers"; no outside source): Pipeline.process_block, which the replay
uses, against Pipeline.process, which the node uses, on the same samples: every column of the
estimates table bit for bit, the state words, and the refusals by reason. And the node's
per-message path (Pipeline.advance, last_outputs: no Estimate built) against the Estimate's
numbers, bit for bit.
"""
import numpy as np
import pytest

from interaction_estimator.core.pipeline import Pipeline
from interaction_estimator.core.samples import SampleBlock
from interaction_estimator.core.settings import Settings
from interaction_estimator.io.estimates import EstimateTable
from interaction_estimator.ros.messages import estimate_outputs
from interaction_estimator.sim.simulator import simulate


def blocks_with_bad_samples(run, size: int):
    """The run as blocks of ``size`` (time from 1 s), with a NaN effort, a repeated stamp and
    a stamp going backwards planted in it."""
    t = run.time + 1.0
    pos, vel, eff = run.position.copy(), run.velocity.copy(), run.effort.copy()
    eff[1500, 4] = np.nan
    t[2500] = t[2499]
    t[3300] = t[3299] - 0.2
    flags = np.zeros(len(t), bool)
    for a in range(0, len(t), size):
        b = slice(a, a + size)
        yield SampleBlock(t[b], run.joint_names, pos[b], vel[b], eff[b], flags[b])


@pytest.mark.parametrize("scenario, extra", [
    ("drawer", {}),
    ("door", {"observer.form": "first_order", "observer.gain": [40.0],
              "wrench.mode": "wrench"}),
])
def test_block_path_equals_sample_path(scenario, extra):
    run = simulate(scenario, duration=6.0, seed=5)
    settings = Settings({**run.settings, **extra})
    one, many = Pipeline(settings, run.urdf), Pipeline(settings, run.urdf)
    lean = Pipeline(settings, run.urdf)
    by_sample, by_block = EstimateTable(), EstimateTable()
    for block in blocks_with_bad_samples(run, 777):
        for i in range(len(block)):
            est = one.process(block.sample(i))
            assert lean.advance(block.sample(i)) == (est is not None)
            if est is not None:
                by_sample.append(est)
                np.testing.assert_array_equal(lean.last_outputs(), estimate_outputs(est))
                assert lean.observer_restarts == est.observer_restarts
        by_block.append_block(many.process_block(block))
    a, b = by_sample.columns(), by_block.columns()
    assert len(by_sample) == len(by_block) == len(run.time) - 3
    for name in a:
        if name == "state":
            assert list(a[name]) == list(b[name])
        else:
            np.testing.assert_array_equal(a[name], b[name], err_msg=name)
    assert one.rejects.counts == many.rejects.counts == lean.rejects.counts
    assert {k for k, v in many.rejects.counts.items() if v} == {
        "non_finite", "duplicate_time", "time_backwards"}
    assert set(a["state"]) >= {"learning_bias", "free_motion", "in_contact"}


def test_block_of_misfit_arrays_goes_sample_by_sample():
    run = simulate("drawer", duration=4.0, seed=1)
    pipe = Pipeline(Settings(run.settings), run.urdf)
    k = 50
    block = SampleBlock(run.time[:k] + 1.0, run.joint_names, run.position[:k],
                        run.velocity[:k], run.effort[:k, :-1], np.zeros(k, bool))
    out = pipe.process_block(block)
    assert len(out) == 0 and pipe.rejects.counts["length_mismatch"] == k
