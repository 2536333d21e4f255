"""Offline replay: a recorded bag through the same Pipeline as the node, into files.

``interaction-estimator replay BAG [BAG ...] --out DIR`` writes, per bag:

* ``estimates.csv``: one row per processed sample (columns in :mod:`..io.estimates`), or
  ``estimates.parquet`` with ``--format parquet`` (the same columns);
* ``summary.json``: final parameters with std, time to convergence, error against the ground
  truth when the bag has it, force RMSE against a reference wrench, rejects by reason, samples,
  duration and throughput;
* ``report.html``: plots and the same table (:mod:`.report`);
* ``estimates_bag/`` (with ``--output-bag``): the node's three output topics as an MCAP bag.

With one bag, DIR holds these files; with several, DIR holds one subdirectory per bag (named
after it), the bags run in parallel processes (``--jobs``) or on a cluster (``--cluster``), and
DIR also holds runs.json and fleet.html (:mod:`.fleet`). Every output directory is built
under a temporary name beside it and renamed when complete: a failed replay leaves no
directory that looks like a result.

Settings: the defaults, then the settings recommended in the bag's ground truth (simulated bags
carry them), then ``--params FILE`` (ROS 2 parameter YAML, the node's file). URDF: ``--urdf
FILE``, else the ``robot_description_file`` setting, else the bag's ``robot_description``.
"""
from __future__ import annotations

import json
import math
import sys
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO

import numpy as np

from ..core.base import OdometryMessage
from ..core.model import ModelError
from ..core.pipeline import Pipeline
from ..core.samples import Sample
from ..core.settings import NODE_NAME, Settings, SettingsError
from ..io.bag import RecordedBag, TopicNames
from ..io.bag_writer import BagWriter
from ..io.cdr import (
    DIAGNOSTIC_STATUS,
    FLOAT64_MULTI_ARRAY,
    WRENCH_STAMPED,
    StatusEncoder,
    WrenchEncoder,
    seconds_to_stamp,
)
from ..io.description_file import resolve as resolve_description
from ..io.estimates import (
    FILE_NAMES,
    FORMATS,
    EstimateTable,
    ForceReference,
    summarize,
    write_estimates,
)
from ..io.files import Staged, write_atomic
from ..io.ground_truth import BagError, GroundTruth
from ..io.node_outputs import (
    NodeFigures,
    cartesian_encoder,
    environment_encoder,
    estimate_outputs,
    mechanism_encoder,
    mechanism_numbers,
    output_numbers,
    status_fields,
)
from ..io.parameter_file import load_parameter_file

OUTPUT_FILES = ("estimates.csv", "summary.json", "report.html")
OUTPUT_BAG_DIR = "estimates_bag"
NODE_TOPICS = {"wrench": f"/{NODE_NAME}/wrench", "environment": f"/{NODE_NAME}/environment",
               "status": f"/{NODE_NAME}/status",
               "environment_cartesian": f"/{NODE_NAME}/environment_cartesian",
               "mechanism": f"/{NODE_NAME}/mechanism"}


class ReplayError(ValueError):
    """A replay cannot run as asked (bad input the user can fix); the message says why."""


INPUT_ERRORS: tuple[type[Exception], ...] = (ReplayError, BagError, SettingsError, ModelError)


@dataclass(frozen=True)
class ReplayRequest:
    """One bag to replay. bag: rosbag2 path; out: output directory; params: ROS 2 parameter
    YAML or None; urdf: URDF file or None; topics: ``ROLE=TOPIC`` overrides; reference_topic:
    WrenchStamped topic to compare with; output_bag: also write the estimates as a bag;
    progress: show a progress bar on stderr (None: only when stderr is a terminal);
    bag_settings: apply the settings recommended in the bag's ground truth (simulated bags)
    beneath the parameter file; bag_label: how the bag is named in the outputs (default: its
    path); file_format: of the estimates file, 'csv' (estimates.csv) or 'parquet'
    (estimates.parquet, the same columns); report: write report.html (False: the estimates
    file and summary.json only, for batch runs)."""

    bag: Path
    out: Path
    params: Path | None = None
    urdf: Path | None = None
    topics: tuple[str, ...] = ()
    reference_topic: str | None = None
    output_bag: bool = False
    progress: bool | None = None
    bag_settings: bool = True
    bag_label: str | None = None
    file_format: str = "csv"
    report: bool = True


@dataclass
class ReplayResult:
    """What a replay produced: the summary dict, the columns and the output directory."""

    summary: dict[str, Any]
    columns: dict[str, np.ndarray]
    out: Path
    extras: dict[str, Any] = field(default_factory=dict)


# --------------------------------------------------------------------------------------------
# output directories


def check_output_dir(out: Path) -> None:
    """Refuse an output path that exists and is not an earlier result (or empty)."""
    if out.exists():
        if not out.is_dir():
            raise ReplayError(f"output {str(out)!r} exists and is a file; expected a directory "
                              "path (new, or an earlier replay's output to replace)")
        entries = list(out.iterdir())
        if entries and not (out / "summary.json").exists() and not (out / "runs.json").exists():
            raise ReplayError(f"output directory {str(out)!r} exists and holds other files; "
                              "expected a new directory or an earlier replay's output")
    ancestor = out.parent
    while not ancestor.exists() and ancestor != ancestor.parent:
        ancestor = ancestor.parent
    if not ancestor.is_dir():
        raise ReplayError(f"cannot write to {str(out)!r}: {str(ancestor)!r} is a file; expected "
                          "a directory path")


class StagedDir(Staged):
    """An output directory written under a temporary name (:class:`~..io.files.Staged`,
    created empty at :attr:`path`) and moved to ``final`` on :meth:`commit`; an earlier result
    there is replaced only then. Without a commit (an error), nothing is left."""

    def __init__(self, final: Path):
        # missing parent folders are made (--out a/b/c), and removed again if nothing is
        # committed into them
        self._made: list[Path] = []
        parent = final.parent
        while not parent.exists():
            self._made.append(parent)
            parent = parent.parent
        final.parent.mkdir(parents=True, exist_ok=True)
        super().__init__(final)
        self.final = final
        self.path.mkdir()

    def __enter__(self) -> StagedDir:  # type: ignore[override]
        return self

    def __exit__(self, *exc: Any) -> None:
        if not self.committed:
            self.discard()
            for made in self._made:   # innermost first
                try:
                    made.rmdir()
                except OSError:
                    break


# --------------------------------------------------------------------------------------------
# settings and model


def load_settings(params: Path | None, truth: GroundTruth | None,
                  bag_settings: bool = True) -> tuple[Settings, list[str]]:
    """Defaults <- the bag's recommended settings (unless ``bag_settings`` is False) <- the
    parameter file. Returns the settings and a list naming the sources used."""
    sources = ["defaults"]
    base = Settings()
    if bag_settings and truth is not None and truth.settings:
        try:
            base = base.replace(truth.settings)
        except SettingsError as exc:
            raise ReplayError(f"the bag's recommended settings are not valid: {exc}") from None
        sources.append("bag ground truth (recommended settings)")
    if params is not None:
        base = load_parameter_file(params, base)
        sources.append(f"parameter file {str(params)}")
    return base, sources


def load_urdf(urdf: Path | None, settings: Settings, bag: RecordedBag,
              params: Path | None = None) -> tuple[str, str]:
    """(URDF text, where it came from): ``--urdf``, else ``robot_description_file`` (relative
    to the parameter file that sets it), else the bag's own description."""
    if urdf is not None:
        try:
            return Path(urdf).read_text(encoding="utf-8"), f"file {str(urdf)}"
        except OSError as exc:
            raise ReplayError(f"URDF file {str(urdf)!r} cannot be read: {exc.strerror}; "
                              "expected a readable URDF file") from None
    path = settings["robot_description_file"]
    if path:
        path = str(resolve_description(path, [params] if params is not None else []))
        try:
            return Path(path).read_text(encoding="utf-8"), f"robot_description_file {path}"
        except OSError as exc:
            raise ReplayError(f"robot_description_file {path!r} cannot be read: "
                              f"{exc.strerror}") from None
    text = bag.urdf()
    if text is None:
        raise ReplayError(f"bag {str(bag.path)!r} has no robot_description topic and no URDF "
                          "was given; expected --urdf FILE (or robot_description_file in the "
                          "parameter file, or a recorded robot_description)")
    return text, f"bag topic {bag.info.robot_description}"


def load_base(pipeline: Pipeline, bag: RecordedBag, settings: Settings) -> str:
    """With base.source odometry: every odometry (and IMU) message of the bag into the
    pipeline, in recorded order (refused ones counted); returns where the base's state comes
    from, in words ('joints' otherwise)."""
    if pipeline.base is None:
        return "joints"
    use_imu = settings["base.imu"]
    for msg in bag.base_messages(use_imu):
        if isinstance(msg, OdometryMessage):
            pipeline.add_odometry(msg)
        else:
            pipeline.add_imu(msg)
    if pipeline.base.odometry.count == 0:
        raise ReplayError(f"no usable odometry message on {bag.info.odometry!r} of bag "
                          f"{str(bag.path)!r} (refused: {pipeline.rejects.last_message}); "
                          "expected nav_msgs/Odometry of the robot's base")
    where = f"odometry topic {bag.info.odometry}"
    if use_imu:
        where += f", imu topic {bag.info.imu} (roll, pitch, angular rate)"
    return where


def check_joint_names(pipeline: Pipeline, first: Sample, bag: RecordedBag) -> None:
    model = pipeline.model.joint_names
    missing = [j for j in model if j not in first.names]
    if missing:
        raise ReplayError(
            f"the URDF does not match the bag: its joints {missing} are not in the joint states "
            f"on {bag.info.joint_states!r}, which name {list(first.names)}; expected the URDF "
            "of the recorded robot (--urdf FILE)")


# --------------------------------------------------------------------------------------------
# progress


class Progress:
    """A one-line progress bar on a stream (redrawn at most every 0.25 s)."""

    def __init__(self, total: int, label: str, stream: TextIO = sys.stderr):
        self.total, self.label, self.stream = max(total, 1), label, stream
        self.start = time.perf_counter()
        self._last = 0.0

    def update(self, done: int, stamp_span: float) -> None:
        now = time.perf_counter()
        if now - self._last < 0.25 and done < self.total:
            return
        self._last = now
        frac = min(done / self.total, 1.0)
        width = 30
        bar = "#" * int(frac * width) + "." * (width - int(frac * width))
        wall = now - self.start
        speed = f", {stamp_span / wall:.1f}x real time" if wall > 0 else ""
        self.stream.write(f"\r{self.label} [{bar}] {100 * frac:5.1f} % {done}/{self.total}"
                          f"{speed}")
        self.stream.flush()

    def close(self) -> None:
        self.stream.write("\n")
        self.stream.flush()


# --------------------------------------------------------------------------------------------
# the output bag (the node's messages, serialized by ROS 2 itself)


class NodeOutputBag:
    """Writes each Estimate as the node would publish it: ``~/wrench`` and ``~/environment`` per
    sample, ``~/status`` at ``output.status_rate`` (message stamps; log time = sample stamp).
    The messages are the node's (:mod:`..io.node_outputs`), written as CDR bytes by
    :mod:`..io.cdr` (the bytes the node publishes; no ROS installation needed)."""

    def __init__(self, path: Path, settings: Settings, pipeline: Pipeline):
        self.frame = settings["output.frame_id"] or pipeline.world_frame
        rate = settings["output.status_rate"]
        self._status_period = 0.0 if rate == 0 else 1.0 / rate
        self._last_status = -math.inf
        self._pipeline = pipeline
        self._wrench = WrenchEncoder(self.frame).encode
        model = pipeline.object_model.name
        self._m = pipeline.object_model.size
        cartesian = model == "cartesian"
        self._environment_topic = NODE_TOPICS["environment_cartesian" if cartesian
                                              else "environment"]
        self._environment = (cartesian_encoder() if cartesian else environment_encoder()).encode
        self._mechanism = (mechanism_encoder().encode if model in ("revolute", "prismatic")
                           else None)
        self._status = StatusEncoder().encode
        self._writer = BagWriter(path, "mcap")
        self._writer.__enter__()

    def add(self, est: Any) -> None:
        numbers = output_numbers(estimate_outputs(est), self._m)
        if numbers is None:   # not finite: the node does not publish it either
            return
        force, torque, values, stds = numbers
        w = self._writer
        sec, nanosec = seconds_to_stamp(est.time)
        ns = sec * 1_000_000_000 + nanosec
        w.write(NODE_TOPICS["wrench"], WRENCH_STAMPED, ns,
                self._wrench(sec, nanosec, force, torque))
        w.write(self._environment_topic, FLOAT64_MULTI_ARRAY, ns,
                self._environment(*values, *stds))
        if est.time - self._last_status >= self._status_period:
            self._last_status = est.time
            if self._mechanism is not None:
                w.write(NODE_TOPICS["mechanism"], FLOAT64_MULTI_ARRAY, ns,
                        self._mechanism(*mechanism_numbers(est)))
            p = self._pipeline
            fig = NodeFigures(node_name=NODE_NAME, rejects=dict(p.rejects.counts),
                              last_reject=p.rejects.last_message, frame_id=self.frame,
                              joints=len(p.model.joint_names),
                              contact_frame=p.model.contact_frame)
            w.write(NODE_TOPICS["status"], DIAGNOSTIC_STATUS, ns,
                    self._status(status_fields(est, fig, hardware_id="replay")))

    def close(self, ok: bool) -> None:
        if ok:
            self._writer.__exit__(None, None, None)
        else:
            self._writer.__exit__(RuntimeError, RuntimeError("aborted"), None)


# --------------------------------------------------------------------------------------------
# one bag


def run_pipeline(bag: RecordedBag, pipeline: Pipeline, settings: Settings,
                 on_estimate: Callable[[Any], None] | None = None,
                 progress: Progress | None = None) -> tuple[EstimateTable, int]:
    """Feed every joint state of the bag through the pipeline; (table, samples read)."""
    table = EstimateTable(bag.info.joint_state_count, pipeline.object_model.name)
    append = table.append
    process = pipeline.process
    read = 0
    first_t = None
    tolerance = settings["input.stamp_tolerance"]
    separate = True if settings["input.separate_efforts"] else None
    joints = pipeline.model.joint_names   # the joints that need an effort (separate efforts)
    if on_estimate is None:   # no Estimate needed: the samples a block at a time
        for block in bag.sample_blocks(tolerance, separate, joints):
            if read == 0:
                first_t = float(block.time[0])
            read += len(block)
            table.append_block(pipeline.process_block(block))
            if progress is not None:
                progress.update(read, float(block.time[-1]) - first_t)
        return table, read
    for sample in bag.samples(tolerance, separate, joints):
        if read == 0:
            first_t = sample.time
        read += 1
        est = process(sample)
        if est is not None:
            append(est)
            if on_estimate is not None:
                on_estimate(est)
        if progress is not None and read % 500 == 0:
            progress.update(read, sample.time - first_t)
    return table, read


def replay(req: ReplayRequest) -> ReplayResult:
    """Replay one bag into ``req.out``; raises one of :data:`INPUT_ERRORS` on bad input."""
    out = Path(req.out)
    check_output_dir(out)
    if req.file_format not in FORMATS:
        raise ReplayError(f"estimates format {req.file_format!r} is not supported; expected "
                          f"one of {', '.join(FORMATS)}")
    topics = TopicNames().with_overrides(req.topics)
    t_start = time.perf_counter()
    with RecordedBag(req.bag, topics, req.reference_topic) as bag, StagedDir(out) as stage:
        truth = bag.truth()
        settings, sources = load_settings(req.params, truth, req.bag_settings)
        urdf, urdf_source = load_urdf(req.urdf, settings, bag, req.params)
        pipeline = Pipeline(settings, urdf, whole_recording=True)
        first = bag.samples()
        check_joint_names(pipeline, next(first), bag)
        first.close()
        base_source = load_base(pipeline, bag, settings)
        ref = bag.reference()
        if ref is not None and ref.frame_id not in ("", pipeline.world_frame):
            raise ReplayError(
                f"reference topic {ref.topic!r} is in frame {ref.frame_id!r}; expected the "
                f"world frame {pipeline.world_frame!r} (the URDF root, or the odometry's frame "
                "with base.source odometry) or an empty frame_id, since the estimates are in "
                "the world frame")
        out_bag = (NodeOutputBag(stage.path / OUTPUT_BAG_DIR, settings, pipeline)
                   if req.output_bag else None)
        show = sys.stderr.isatty() if req.progress is None else req.progress
        progress = Progress(bag.info.joint_state_count, Path(req.bag).name) if show else None
        ok = False
        try:
            table, read = run_pipeline(bag, pipeline, settings,
                                       out_bag.add if out_bag else None, progress)
            ok = True
        finally:
            if progress is not None:
                progress.close()
            if out_bag is not None:
                out_bag.close(ok)
        if len(table) == 0:
            counts = {k: v for k, v in pipeline.rejects.counts.items() if v}
            raise ReplayError(
                f"none of the {read} joint states of bag {str(req.bag)!r} could be used "
                f"(rejected: {counts}; last: {pipeline.rejects.last_message}); expected "
                "joint states with finite positions, velocities and efforts in time order")
        wall = time.perf_counter() - t_start
        cols = table.columns()
        reference = (ForceReference(f"bag topic {ref.topic}", ref.time, ref.force)
                     if ref is not None else None)
        source = {
            "bag": req.bag_label or str(req.bag), "storage": bag.info.storage,
            "joint_states_topic": bag.info.joint_states,
            "efforts": ("joint_states" if bag.efforts_in_states
                        and not settings["input.separate_efforts"]
                        else f"topic {bag.info.joint_efforts}"),
            "urdf": urdf_source, "settings": sources,
            "settings_changed": _changed_settings(settings),
            "truth": ("bag ground truth" if truth is not None else None),
            "world_frame": pipeline.world_frame, "base": base_source,
            "scenario": truth.extra.get("scenario") if truth is not None else None,
            "tool": "replay",
        }
        summary = summarize(cols, truth=truth.parameters if truth else None,
                            reference=reference, rejects=pipeline.rejects.counts,
                            samples_read=read, wall_time=wall, source=source,
                            truth_extra=truth.extra if truth else None)
        write_outputs(stage.path, summary, table, reference, file_format=req.file_format,
                      report=req.report)
        stage.commit()
    return ReplayResult(summary, cols, out)


def write_outputs(directory: Path, summary: dict[str, Any],
                  estimates: EstimateTable | dict[str, np.ndarray],
                  reference: ForceReference | None, title: str | None = None,
                  file_format: str = "csv", report: bool = True) -> None:
    """estimates.csv (or estimates.parquet), summary.json and (``report``) report.html into
    ``directory``; ``estimates``: the table (written from its own array) or its columns."""
    write_estimates(directory / FILE_NAMES[file_format], estimates, file_format)
    write_atomic(directory / "summary.json", json.dumps(summary, indent=2, allow_nan=False)
                 + "\n")
    if report:
        from .report import write_report  # imported on use: plotting costs time
        cols = estimates.columns() if isinstance(estimates, EstimateTable) else estimates
        write_report(directory / "report.html", summary, cols, reference, title=title)


def _changed_settings(s: Settings) -> dict[str, Any]:
    default = Settings()
    return {k: v for k, v in s.to_flat().items() if v != default[k]}


# --------------------------------------------------------------------------------------------
# several bags


def subdir_names(bags: list[Path]) -> list[str]:
    """One distinct output subdirectory name per bag (its file or directory name)."""
    names, used = [], set()
    for b in bags:
        base = Path(b).name
        for suffix in (".mcap", ".db3"):
            base = base[:-len(suffix)] if base.endswith(suffix) else base
        name, k = base or "bag", 2
        while name in used:
            name, k = f"{base}-{k}", k + 1
        used.add(name)
        names.append(name)
    return names
