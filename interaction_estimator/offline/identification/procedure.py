"""The identification as a whole: bodies and base parameters of the URDF, the regressor rows of
the free-motion data, a check fit without the held-out part (for the before/after figures),
the final fit on all of it, and per-link results with their intervals."""
from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from threadpoolctl import threadpool_limits

from ...core.model import RobotModel
from . import inertia as inr
from .fit import (
    Options,
    Solution,
    build_rows,
    linear_with_fixed_beta,
    residual_rms,
    solve,
    summary_with_intervals,
)
from .regressor import BaseParameters, base_parameters
from .signals import MotionData
from .structure import Layout, Tool, build_layout
from .urdf_out import identified_urdf

MIN_SAMPLES_PER_PARAMETER = 3   # thinned samples x joints per unknown, at least (our choice)


class IdentificationError(ValueError):
    """The data cannot identify the model as asked; the message says what is missing."""


@dataclass
class LinkResult:
    """One link (or tool) of the identified model. kind 'link' or 'tool'; status 'identified'
    or 'kept' (not excited: as in the URDF); determined: parameters' worth the data pinned
    down (of 10); urdf, value, half_width (10,): [mass kg, centre of mass (3) m, inertia about
    it (xx, xy, yy, xz, yz, zz) kg·m²] before, after and the 95 % half-widths (nan when kept);
    pi_urdf, pi (10,): dynamic parameters in the joint's (tool: its link's) frame."""

    name: str
    joint: str
    kind: str
    status: str
    determined: float
    urdf: np.ndarray
    value: np.ndarray
    half_width: np.ndarray
    pi_urdf: np.ndarray
    pi: np.ndarray


@dataclass
class ModelIdentification:
    """Everything the identification found. residual_before/after (nv,) N·m or N: RMS of the
    held-out free-motion efforts minus the URDF model (friction and bias refitted) and minus the
    model identified without them; viscous, coulomb (nv,) or None; bias (bags, nv)."""

    layout: Layout
    base: BaseParameters
    final: Solution
    check: Solution
    links: list[LinkResult]
    joints: tuple[str, ...]
    residual_before: np.ndarray
    residual_after: np.ndarray
    held_out_time: float
    used_time: float
    samples: int
    data: MotionData
    viscous: np.ndarray | None
    coulomb: np.ndarray | None
    bias: np.ndarray
    beta_urdf: np.ndarray
    notes: list[str] = field(default_factory=list)

    @property
    def changed(self) -> list[bool]:
        return [bool(f) for f in self.final.free]

    def urdf(self, source: str, header: Sequence[str]) -> str:
        """The identified model as URDF text (from ``source``, the URDF given)."""
        return identified_urdf(source, self.layout, self.final.links, self.changed,
                               self.final.tools, header)


def _results(layout: Layout, sol: Solution) -> list[LinkResult]:
    out = []
    n = len(layout.bodies)
    for b, body in enumerate(layout.bodies):
        urdf, _ = summary_with_intervals(body.link_urdf, np.zeros((10, 10)))
        if sol.free[b]:
            value, half = summary_with_intervals(sol.links[b], sol.covariance[b])
        else:
            value, half = urdf, np.full(10, np.nan)
        out.append(LinkResult(body.link, body.joint, "link",
                              "identified" if sol.free[b] else "kept",
                              float(sol.determined[b]), urdf, value, half, body.link_urdf,
                              sol.links[b]))
    for t, tool in enumerate(layout.tools):
        value, half = summary_with_intervals(sol.tools[t], sol.covariance[n + t])
        out.append(LinkResult(tool.name, tool.link, "tool", "identified",
                              float(sol.determined[n + t]), np.full(10, np.nan), value, half,
                              np.zeros(10), sol.tools[t]))
    return out


def identify_model(robot: RobotModel, urdf: str, data: MotionData, n_bags: int,
                   options: Options, tools: Sequence[Tool] = ()) -> ModelIdentification:
    """Identify the inertial parameters of ``robot`` (built from ``urdf``) from ``data``;
    raises IdentificationError when there are too few samples.

    Runs with one BLAS thread (threadpoolctl): the work is many small LAPACK calls (the trust
    region's SVDs of a ~150 x 100 Jacobian), which OpenBLAS's threads made 10-17x slower on a
    shared two-core machine (measured: SVD of 118 x 67 45 ms with its threads, 2.6 ms with one;
    QR of 46613 x 52 2.0 s and 0.23 s)."""
    with threadpool_limits(limits=1, user_api="blas"):
        return _identify(robot, urdf, data, n_bags, options, tools)


def _identify(robot: RobotModel, urdf: str, data: MotionData, n_bags: int, options: Options,
              tools: Sequence[Tool]) -> ModelIdentification:
    layout = build_layout(robot, urdf, list(tools), options.relative_spread)
    names = [b.link for b in layout.bodies]
    base = base_parameters(robot.model, names)
    unknowns = base.count + (2 * robot.nv if options.motor_side else 0) + n_bags * robot.nv
    if len(data) * robot.nv < MIN_SAMPLES_PER_PARAMETER * unknowns:
        raise IdentificationError(
            f"{len(data)} usable free-motion samples ({data.duration():.2f} s after filtering) "
            f"for {unknowns} unknowns; expected at least "
            f"{MIN_SAMPLES_PER_PARAMETER * unknowns // robot.nv + 1} (record the commissioning "
            "motion of `interaction-estimator excitation` for its whole length)")
    rows = build_rows(layout, base, data, options, n_bags)
    train = ~rows.held
    check = solve(layout, base, rows, train, options)
    tools_prior = np.zeros((len(layout.tools), 10))
    for t, tool in enumerate(layout.tools):
        tools_prior[t, 0] = tool.mass_guess
    beta_urdf = base.matrix @ layout.body_parameters(
        np.array([b.link_urdf for b in layout.bodies]), tools_prior)
    before_lin = linear_with_fixed_beta(rows, train, beta_urdf, options.motor_side)
    before = residual_rms(rows, rows.held, beta_urdf, before_lin)
    after = residual_rms(rows, rows.held, check.beta, check.linear)
    final = solve(layout, base, rows, np.ones(rows.samples, bool), options)
    nv = robot.nv
    viscous = coulomb = None
    if options.motor_side:
        viscous, coulomb = final.linear[:nv], final.linear[nv:2 * nv]
    nf = 2 * nv if options.motor_side else 0
    bias = final.linear[nf:].reshape(n_bags, nv)
    held_time = data.duration() - _duration(data, ~rows.held)
    notes = list(final.notes)
    for r in _results(layout, final):
        if r.status == "kept":
            notes.append(f"{r.name}: not excited (the data determined {r.determined:.2f} of its "
                         "10 parameters' worth): kept from the URDF")
    return ModelIdentification(layout, base, final, check, _results(layout, final),
                               robot.joint_names, before, after, held_time, data.duration(),
                               len(data), data, viscous, coulomb, bias, beta_urdf, notes)


def _duration(data: MotionData, mask: np.ndarray) -> float:
    total = 0.0
    for r in np.unique(data.run[mask]):
        t = data.time[mask & (data.run == r)]
        if len(t) > 1:
            total += float(t[-1] - t[0]) + float(np.median(np.diff(t)))
    return total


def physical_problems(result: ModelIdentification) -> list[str]:
    """Every identified link or tool that is not a physical body (Traversaro et al. 2016);
    [] always for this method's output, checked before anything is written."""
    out = []
    for r in result.links:
        if r.status == "identified":
            problem = inr.consistency_violation(r.pi)
            if problem:
                out.append(f"{r.kind} {r.name!r}: {problem}")
    return out
