"""The node's parameters at run time, a mixin of :class:`~.estimator._Estimator`: declaring
every setting (and node-only setting) with its descriptor, reading and validating them into
Settings, storing normalized types, and accepting or refusing a runtime change with the reason.
The declarations themselves (descriptors, ranges, conversions) are :mod:`.parameters`."""
from __future__ import annotations

from typing import Any

from rcl_interfaces.msg import SetParametersResult
from rclpy.exceptions import ParameterUninitializedException
from rclpy.parameter import Parameter

from ..core.settings import SPECS, Settings, SettingsError, unknown_name_message
from . import parameters as node_params


class _ParameterHandling:
    """Parameter declaration, reading and runtime changes of the estimator node (mixed into
    :class:`~.estimator._Estimator`)."""

    # --- parameters (both node kinds) -------------------------------------------------
    def _declare_parameters(self) -> dict[str, str]:
        """Declare every setting (and node-only setting) as a parameter. A value from a
        parameter file that rclpy refuses (wrong type, out of the descriptor's range) leaves
        the default declared; returns {name: why} for those, and for names no setting has
        (key ``<unknown>``)."""
        errors: dict[str, str] = {}
        for spec in SPECS:
            try:
                self.declare_parameter(spec.name, node_params.declared_default(spec),
                                       node_params.descriptor(spec))
            except Exception as exc:  # a parameter-file value of the wrong type or range
                errors[spec.name] = (f"parameter {spec.name}: {exc}; expected "
                                     f"{spec.range_text()}")
                self.declare_parameter(spec.name, node_params.declared_default(spec),
                                       node_params.descriptor(spec), ignore_override=True)
        # what the parameter files and -p set (rclpy keeps it; no public accessor exists)
        overrides = list(getattr(self, "_parameter_overrides", {}))
        unknown = node_params.unknown_overrides(overrides,
                                                [n for n in overrides if self.has_parameter(n)])
        if unknown:
            errors["<unknown>"] = "; ".join(unknown_name_message(n) for n in unknown)
        return errors

    def _read_settings(self) -> Settings:
        """The settings the declared parameters hold, validated (raises SettingsError)."""
        values: dict[str, Any] = {}
        for spec in SPECS:
            try:
                param = self.get_parameter(spec.name)
            except ParameterUninitializedException:
                param = Parameter(spec.name)
            values[spec.name] = node_params.setting_value(param)
        return Settings(values)

    def _normalize_declared(self) -> None:
        """Store floats and typed lists where a file wrote 9 for 9.0 or [] (not for read-only
        ones)."""
        fixes = []
        for spec in SPECS:
            try:
                param = self.get_parameter(spec.name)
            except ParameterUninitializedException:
                param = Parameter(spec.name)
            fixed = node_params.normalized(param)
            if not spec.read_only and fixed.type_ != param.type_:
                fixes.append(fixed)
        if fixes:
            self.set_parameters(fixes)

    def _normalize_parameters(self, params: list[Parameter]) -> list[Parameter]:
        return [node_params.normalized(p) for p in params]

    def _on_set_parameters(self, params: list[Parameter]) -> SetParametersResult:
        changes = node_params.changes_from(params)
        if not changes:
            return SetParametersResult(successful=True)
        try:
            new = self.settings.replace(changes)
            node_params.check_fits_model(new, None if self.pipeline is None
                                         else self.pipeline.model.joint_names)
        except SettingsError as exc:
            self.get_logger().warning(f"parameter change refused: {exc}")
            return SetParametersResult(successful=False, reason=str(exc))
        try:
            if self.pipeline is not None:
                self.pipeline.apply_settings(new)
        except Exception as exc:  # the change is refused; the pipeline keeps running
            reason = f"could not apply {sorted(changes)}: {type(exc).__name__}: {exc}"
            self.get_logger().warning(f"parameter change refused: {reason}")
            return SetParametersResult(successful=False, reason=reason)
        old, self.settings = self.settings, new
        for name in changes:
            self._declare_errors.pop(name, None)
        self._matcher.tolerance_s = new["input.stamp_tolerance"]
        if new["output.marker_force_scale"] != old["output.marker_force_scale"]:
            self._marker_builder = None   # made again with the new scale
        if new["output.diagnostics_rate"] != old["output.diagnostics_rate"]:
            self.destroy_timer(self._diagnostics_timer)
            self._diagnostics_timer = self.create_timer(1.0 / new["output.diagnostics_rate"],
                                                        self._on_diagnostics)
        self.get_logger().info("parameters changed: " + ", ".join(
            f"{k}={v!r}" for k, v in sorted(changes.items())))
        return SetParametersResult(successful=True)
