"""Ground truth and reference series stored in a bag (by the simulator, or by a test rig).

Ground truth of the object's parameters is a JSON document (:data:`TRUTH_FORMAT`) in one
std_msgs/String message on ``ground_truth/parameters``; the same text is also stored in the bag's
metadata (``custom_data``, key :data:`TRUTH_METADATA_KEY`), and either place is read. Its keys:
``format``, ``parameters`` ({mass kg, damping N·s/m, stiffness N/m, static_force N}, or null when
the recording has no object, such as the free-motion ``commissioning`` scenario), ``units``
(absent with null parameters), and optionally ``scenario``, ``description``, ``contact_time``
(s, null without contact), ``settings`` (recommended estimator settings by dotted name),
``seed``, ``effort_side``, ``noise``.
"""
from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from ..core.object_models import ALONG_DIRECTION, CARTESIAN

TRUTH_FORMAT = "interaction_estimator.ground_truth/1"
TRUTH_METADATA_KEY = "interaction_estimator.ground_truth"


class BagError(ValueError):
    """A bag cannot be used as asked: the message names what was found and what was expected."""


@dataclass(frozen=True)
class GroundTruth:
    """Ground truth stored in a bag: parameters {name: value} in kg, N·s/m, N/m, N (None when
    the recording has no object: free motion only), and the rest of the JSON document
    (``extra``: scenario, contact_time s, recommended settings, ...)."""

    parameters: dict[str, float] | None
    extra: dict[str, Any] = field(default_factory=dict)

    @property
    def settings(self) -> dict[str, Any]:
        """Recommended estimator settings by dotted name (may be empty)."""
        s = self.extra.get("settings") or {}
        return dict(s) if isinstance(s, Mapping) else {}

    def to_json(self) -> str:
        units = ({} if self.parameters is None else
                 {"units": {"mass": "kg", "damping": "N·s/m", "stiffness": "N/m",
                            "static_force": "N"}})
        return json.dumps({"format": TRUTH_FORMAT, "parameters": self.parameters, **units,
                           **self.extra}, sort_keys=True)

    @classmethod
    def from_json(cls, text: str, where: str) -> GroundTruth:
        try:
            doc = json.loads(text)
        except json.JSONDecodeError as exc:
            raise BagError(f"{where}: ground truth is not valid JSON ({exc}); expected a "
                           f"document of format {TRUTH_FORMAT!r}") from None
        if not isinstance(doc, dict) or doc.get("format") != TRUTH_FORMAT:
            found = doc.get("format") if isinstance(doc, dict) else type(doc).__name__
            raise BagError(f"{where}: ground truth has format {found!r}; expected "
                           f"{TRUTH_FORMAT!r}")
        params = doc.get("parameters")
        extra = {k: v for k, v in doc.items() if k not in ("format", "parameters", "units")}
        if params is None and "parameters" in doc:   # null: a recording without an object
            return cls(None, extra)
        # the four parameters along a direction, or the 21 of the cartesian model
        cartesian = isinstance(params, dict) and "mass_xx" in params
        names = CARTESIAN.parameter_names if cartesian else ALONG_DIRECTION.parameter_names
        if not isinstance(params, dict) or not all(
                isinstance(params.get(n), (int, float)) and not isinstance(params.get(n), bool)
                for n in names):
            raise BagError(f"{where}: ground truth 'parameters' is {params!r}; expected numbers "
                           f"for {', '.join(ALONG_DIRECTION.parameter_names)} (or the "
                           "cartesian model's mass_xx ... static_force_z), or null for a "
                           "recording without an object")
        return cls({n: float(params[n]) for n in names}, extra)


@dataclass(frozen=True)
class ReferenceWrench:
    """A WrenchStamped series: time (M,) s (stamps), force (M, 3) N, torque (M, 3) N·m."""

    topic: str
    frame_id: str
    time: np.ndarray
    force: np.ndarray
    torque: np.ndarray


