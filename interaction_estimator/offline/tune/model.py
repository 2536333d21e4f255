"""The robot's own dynamics (and a mounted tool) identified within the tuning, from free motion.

Which data are free motion: the bags the user names as such (``--free-motion``: the
commissioning motion, nothing touched from start to end) whole, and the free-motion stretches
of the other bags as the Pipeline's contact monitor finds them. The monitor needs a model that
is about right, so the identification runs twice: first on the named bags alone (model A), then
the other bags pass through the Pipeline with model A, and the identification runs again on all
free motion (model B). Without named bags, the first model is the URDF as given. The rest of the
tuning (bias, friction, noise, the environment filter) then runs with model B.

The method is :mod:`interaction_estimator.offline.identification`.
"""
from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ...core.model import RobotModel
from ...core.settings import Settings
from ..identification import (
    IdentificationError,
    ModelIdentification,
    Options,
    RawRun,
    Tool,
    identify_model,
    physical_problems,
    prepare,
    runs_from_samples,
)
from ..identification.signals import DEFAULT_WINDOW
from .common import TuneError
from .passes import run_pass
from .recordings import Recording
from .segments import free_mask, margin

MIN_TASK_FREE_TIME = 1.0   # s of free motion a task bag must add to be used (our choice)


@dataclass
class ModelRequest:
    """What to identify. free_motion: indices of the recordings in which the robot touched
    nothing; tools: tools the URDF lacks; spread: prior spread of the URDF's values (fraction
    of each link's own size); window s: the smoothing differentiator's window."""

    free_motion: tuple[int, ...] = ()
    tools: tuple[Tool, ...] = ()
    spread: float = 0.5
    window: float = DEFAULT_WINDOW

    @property
    def wanted(self) -> bool:
        return bool(self.free_motion or self.tools)


@dataclass
class ModelResult:
    """The identification and where its data came from. sources: (recording index, how it was
    used, s of free motion before filtering); urdf: the identified model as URDF text (header
    written by the command); rejected: samples refused (not finite, unknown joints)."""

    identification: ModelIdentification
    urdf: str
    sources: list[tuple[int, str, float]] = field(default_factory=list)
    rejected: dict[str, int] = field(default_factory=dict)


def _free_runs(rec: Recording, robot: RobotModel, bag: int, keep: np.ndarray | None
               ) -> tuple[list[RawRun], dict[str, int], float]:
    runs, counts = runs_from_samples(rec.samples, robot, bag, keep)
    seconds = float(sum(r.time[-1] - r.time[0] for r in runs))
    return runs, counts, seconds


def _identify(recs: Sequence[Recording], parts: list[tuple[int, np.ndarray | None, str]],
              urdf: str, base: Settings, request: ModelRequest
              ) -> ModelResult:
    robot = RobotModel(urdf, base["contact_frame"], base["gravity"])
    runs: list[RawRun] = []
    counts: dict[str, int] = {}
    sources = []
    bags = sorted({i for i, _, _ in parts})
    for i, keep, how in parts:
        r, c, seconds = _free_runs(recs[i], robot, bags.index(i), keep)
        runs += r
        sources.append((i, how, seconds))
        for k, v in c.items():
            counts[k] = counts.get(k, 0) + v
    data = prepare(runs, robot, request.window, counts)
    options = Options(motor_side=base["effort_side"] == "motor",
                      smoothing_velocity=base["friction.smoothing_velocity"],
                      relative_spread=request.spread)
    tools = [Tool(t.name, t.link, t.mass_guess) for t in request.tools]
    try:
        result = identify_model(robot, urdf, data, len(bags), options, tools)
    except IdentificationError as exc:
        raise TuneError(f"robot model not identified: {exc}") from None
    problems = physical_problems(result)
    if problems:  # cannot happen with the log-Cholesky parametrisation; never written if it did
        raise TuneError("the identified model is not physical: " + "; ".join(problems))
    text = result.urdf(urdf, ["inertial values identified by interaction-estimator tune"])
    return ModelResult(result, text, sources, {k: v for k, v in counts.items()
                                               if k in ("not_finite", "unknown_joints")})


def identify_robot(recs: Sequence[Recording], urdf: str, base: Settings,
                   params: Mapping[str, Any], request: ModelRequest,
                   bag_settings: Callable[[Recording], Settings],
                   say: Callable[[str], None]) -> ModelResult:
    """Model A from the named free-motion bags, then model B from all free motion (see the
    module text). Raises TuneError when there is too little free motion."""
    for i in request.free_motion:
        if not 0 <= i < len(recs):
            raise TuneError(f"free-motion bag index {i} is not one of the {len(recs)} bags")
    named = [(i, None, "free motion throughout (named)") for i in request.free_motion]
    model_a = None
    if named:
        say(f"identifying the robot's dynamics from {len(named)} free-motion bag(s)")
        model_a = _identify(recs, named, urdf, base, request)
    urdf_a = model_a.urdf if model_a is not None else urdf
    others = [i for i in range(len(recs)) if i not in request.free_motion]
    found: list[tuple[int, np.ndarray | None, str]] = []
    robot = RobotModel(urdf_a, base["contact_frame"], base["gravity"])
    clear = margin(base, robot.joint_names)
    for i in others:
        say(f"finding the free motion of {Path(recs[i].name).name} with "
            + ("the model identified so far" if model_a is not None else "the URDF"))
        trace = run_pass(recs[i], bag_settings(recs[i]), urdf_a)
        mask = free_mask(trace, clear, startup_only=False)
        times = trace.time[mask]
        if len(times) < 2:
            continue
        sample_t = np.array([s.time for s in recs[i].samples])
        keep = np.isin(sample_t, times)
        seconds = float(np.sum(np.diff(trace.time, prepend=trace.time[0])[mask]))
        if seconds >= MIN_TASK_FREE_TIME:
            found.append((i, keep, "its free-motion stretches"))
    if not named and not found:
        raise TuneError(
            "robot model not identified: no bag was named as free motion (--free-motion) and "
            f"no bag has {MIN_TASK_FREE_TIME:g} s of free motion; expected the commissioning "
            "motion of `interaction-estimator excitation` recorded with nothing touched")
    if not found:
        return model_a  # type: ignore[return-value]
    say(f"identifying the robot's dynamics from all free motion ({len(named) + len(found)} "
        "bag(s))")
    return _identify(recs, named + found, urdf, base, request)
