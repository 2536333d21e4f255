"""The node's reporting, a mixin of :class:`~.estimator._Estimator`: the rejects and errors it
counts, ``~/status`` (built from the pipeline's Estimate and the node's own figures, or the
waiting / lifecycle state while there is no estimate), ``/diagnostics`` at about 1 Hz, the watch
timer that reports waiting and stale input, and ``~/markers`` (while subscribed). The state it
reads is set up by ``_Estimator._init_state``."""
from __future__ import annotations

import time
from collections import deque
from collections.abc import Sequence

from builtin_interfaces.msg import Time as TimeMsg
from diagnostic_msgs.msg import DiagnosticArray

from ..core.environment import PARAMETER_NAMES, PARAMETER_UNITS
from ..core.health import ERROR, OK, STALE, WARN
from ..core.pipeline import Estimate, Pipeline
from ..core.samples import Sample, SampleRejected
from .markers import MarkerBuilder, MarkerScene
from .messages import (
    MODEL_ERROR,
    WAITING_FOR_INPUT,
    WAITING_FOR_MODEL,
    NodeFigures,
    StatusFields,
    idle_fields,
    status_object,
)
from .topics import ACTIVE, FINALIZED, INACTIVE, JOINT_STATES_TOPIC, UNCONFIGURED

WATCH_PERIOD_S = 0.25       # s, period of the check that reports waiting / stale states
RATE_TOLERANCE = 0.2        # input rate "far" from input.expected_rate: off by more than 20 %
RECENT_S = 1.0              # s, window of "in the last second" counts


class _StatusReporting:
    """Rejects, errors, status, diagnostics and markers of the estimator node (mixed into
    :class:`~.estimator._Estimator`)."""

    # --- rejects and errors ----------------------------------------------------------------
    def _reject_node(self, exc: SampleRejected) -> None:
        self._node_rejects.add(exc)
        self._last_reject_text = f"{exc.reason}: {exc}"
        now = time.monotonic()
        self._reject_times.append(now)
        self._node_reject_times.append(now)
        self._throttle.emit(exc.reason, f"sample rejected ({exc.reason}): {exc}")

    def _note_pipeline_reject(self, pipeline: Pipeline) -> None:
        self._reject_times.append(time.monotonic())
        r = pipeline.rejects
        self._last_reject_text = f"{r.last_reason}: {r.last_message}"
        self._throttle.emit(r.last_reason, f"sample rejected ({r.last_reason}): "
                                           f"{r.last_message}")

    def _internal_error(self, exc: Exception, what: str) -> None:
        self._errors += 1
        self._error_times.append(time.monotonic())
        self._last_error = f"{type(exc).__name__}: {exc}"
        self._reject_node(SampleRejected("internal_error", f"handling a {what} failed and it "
                                         f"was skipped: {self._last_error}"))

    def _rejects(self) -> dict[str, int]:
        counts = dict(self._old_rejects)
        sources = [self._node_rejects.counts]
        if self.pipeline is not None:
            sources.append(self.pipeline.rejects.counts)
        for source in sources:
            for reason, n in source.items():
                counts[reason] = counts.get(reason, 0) + n
        return counts

    @staticmethod
    def _recent(times: deque[float], now: float) -> int:
        while times and times[0] < now - RECENT_S:
            times.popleft()
        return len(times)

    # --- status ----------------------------------------------------------------------------
    def _frame_id(self) -> str:
        return self.settings["output.frame_id"] or (
            self.pipeline.world_frame if self.pipeline is not None else "")

    def _hardware_id(self) -> str:
        return self.pipeline.model.model.name if self.pipeline is not None else ""

    def _findings(self, est: Estimate | None) -> list[tuple[int, str]]:
        now = time.monotonic()
        s = self.settings
        out: list[tuple[int, str]] = []
        errors = self._recent(self._error_times, now)
        if errors:
            out.append((ERROR, f"{errors} messages failed in the last second "
                               f"({self._last_error})"))
        node_rejects = self._recent(self._node_reject_times, now)
        if node_rejects and self.pipeline is not None:
            out.append((WARN, f"{node_rejects} samples rejected by the node in the last second "
                              f"({self._node_rejects.last_reason})"))
        if self._latency.count and self._latency.mean_s > s["health.max_latency"]:
            out.append((WARN, f"processing latency {self._latency.mean_s * 1e3:.1f} ms above "
                              f"health.max_latency = {s['health.max_latency'] * 1e3:.1f} ms"))
        expected = s["input.expected_rate"]
        if est is not None and expected > 0 and est.rate_hz > 0 and abs(
                est.rate_hz - expected) > RATE_TOLERANCE * expected:
            text = (f"input rate {est.rate_hz:.0f} Hz far from input.expected_rate = "
                    f"{expected:.0f} Hz")
            out.append((WARN, text))
            self._throttle.emit("rate", text)
        return out

    def _figures(self, est: Estimate | None) -> NodeFigures:
        m = self.pipeline.model if self.pipeline is not None else None
        return NodeFigures(
            node_name=self.get_fully_qualified_name().lstrip("/"),
            rejects=self._rejects(), last_reject=self._last_reject_text, errors=self._errors,
            latency_s=self._latency.mean_s, latency_max_s=self._latency.take_max(),
            input_age_s=self._input_age, frame_id=self._frame_id(),
            model_name=m.model.name if m is not None else "",
            joints=len(m.joint_names) if m is not None else 0,
            contact_frame=self.settings["contact_frame"], findings=self._findings(est))

    def _idle_text(self) -> str:
        if self._model_error:
            return self._model_error
        if self.pipeline is None:
            return f"waiting for the robot description on {self._model_source}"
        topic = (self._states_sub.topic_name if self._states_sub is not None
                 else self.resolve_topic_name(JOINT_STATES_TOPIC))
        return f"no usable joint state on {topic}"

    def _lifecycle_state(self) -> tuple[str, int, str]:
        """The status of a managed node that is not active: the lifecycle state's label."""
        if self._lifecycle == UNCONFIGURED:
            if self._configure_error:
                return UNCONFIGURED, ERROR, self._configure_error
            return UNCONFIGURED, WARN, ("not configured: waiting for the configure transition "
                                        "(a lifecycle manager or the change_state service)")
        if self._lifecycle == FINALIZED:
            return FINALIZED, WARN, "shut down"
        if self._model_error:
            return INACTIVE, ERROR, self._model_error
        model = ("model not yet received" if self.pipeline is None
                 else f"model {self.pipeline.model.model.name!r} ready")
        return INACTIVE, OK, (f"configured and inactive ({model}): no estimates until "
                              "activated")

    def _idle_state(self) -> tuple[str, int, str]:
        if self._lifecycle != ACTIVE:
            return self._lifecycle_state()
        if self._model_error:
            return MODEL_ERROR, ERROR, self._model_error
        if self.pipeline is None:
            return WAITING_FOR_MODEL, WARN, self._idle_text()
        now = time.monotonic()
        recent = self._recent(self._reject_times, now)
        text = self._idle_text()
        if self._last_processed is None:
            level, text = WARN, text + " yet"
        else:
            level, text = STALE, f"{text} for {now - self._last_processed:.1f} s: estimates stale"
        if recent:
            text += (f"; {recent} samples rejected in the last second "
                     f"(last: {self._last_reject_text})")
        return WAITING_FOR_INPUT, level, text

    def _publish_idle(self) -> None:
        state, level, text = self._idle_state()
        self._publish(idle_fields(state, level, text, self._figures(None), self._hardware_id()),
                      time.monotonic())

    def _publish(self, status: StatusFields, now: float) -> None:
        self._status_pub.publish(self._status_encoder.encode(status))
        self._last_status, self._last_status_time = status, now

    def _on_watch(self) -> None:
        try:
            self._check_marker_subscribers()
            now = time.monotonic()
            quiet = max(self.settings["health.stale_after"], WATCH_PERIOD_S)
            if self._last_processed is None or now - self._last_processed > quiet:
                self._clear_markers()
                self._publish_idle()
        except Exception as exc:
            self._internal_error(exc, "status check")

    def _on_diagnostics(self) -> None:
        try:
            if self._last_status is None:
                return
            msg = DiagnosticArray()
            msg.header.stamp = self.get_clock().now().to_msg()
            msg.status = [status_object(self._last_status)]
            self._diagnostics_pub.publish(msg)
        except Exception as exc:
            self._internal_error(exc, "diagnostics publication")

    # --- markers ---------------------------------------------------------------------------
    def _publish_markers(self, est: Estimate, sample: Sample, sec: int, nanosec: int) -> None:
        """~/markers for the estimate just published (at the status rate, while subscribed)."""
        builder = self._marker_builder
        model = self._object_model()
        if builder is None:
            builder = self._marker_builder = MarkerBuilder(
                self.settings["output.marker_force_scale"], self.settings["health.stale_after"],
                model[0])
        scene = MarkerScene(
            frame_id=self._frame_id(), stamp=TimeMsg(sec=sec, nanosec=nanosec),
            contact_point=self._contact_point.position(sample), force=est.force,
            direction=est.direction, parameters=est.parameters.tolist(),
            parameter_std=est.parameter_std.tolist(), names=model[1],
            units=model[2], state=est.state,
            level=self._last_status.level if self._last_status is not None else est.level)
        self._markers_pub.publish(builder.markers(scene))
        self._markers_shown = True

    def _object_model(self) -> tuple[str, Sequence[str], Sequence[str]]:
        """(name, parameter names, units) of the Pipeline's object model."""
        m = getattr(self.pipeline, "object_model", None)
        if m is None:
            return "along_direction", PARAMETER_NAMES, PARAMETER_UNITS
        return m.name, m.parameter_names, m.parameter_units

    def _clear_markers(self) -> None:
        """One DELETEALL when markers are shown (stale estimates, model replaced, deactivated)."""
        if self._markers_shown and self._markers_pub is not None:
            self._markers_pub.publish(MarkerBuilder.clear(self._frame_id()))
            self._markers_shown = False

    def _check_marker_subscribers(self) -> None:
        self._markers_wanted = (self._markers_pub is not None
                                and self._markers_pub.get_subscription_count() > 0)
