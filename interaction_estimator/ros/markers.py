"""``~/markers``: the estimate drawn for RViz (visualization_msgs/MarkerArray).

Published at the status rate (``output.status_rate``), and only while something subscribes to
the topic (the node checks a few times a second), so a robot without RViz pays nothing for it.
What is drawn, in the frame of the wrench (the URDF root unless ``output.frame_id``):

* ``force``: an arrow from the contact point (the contact frame's origin) along the force the
  robot applies, ``|F|`` N long times ``output.marker_force_scale`` m/N;
* the environment model's own layers: for ``along_direction`` (the default model) an arrow of
  fixed length along the manipulation direction u (namespace ``direction``). A model adds its
  layers with :func:`register_environment_layer` (a hinge's axis and arc, a slider's axis):
  each layer is a function of the :class:`MarkerScene` returning markers;
* ``parameters``: a text facing the viewer, above the contact point, with each parameter
  +/- its standard deviation (unit) and the health state, coloured by the status level.

Every marker has a lifetime of ``health.stale_after`` s, and the node sends one DELETEALL when
the estimates go stale (no input for that long), when it is deactivated and when its model is
replaced, so RViz never shows an old estimate as if it were current.

Colours are our own (the hues of the replay report's level colours): OK green, WARN amber,
ERROR red, STALE grey; the force arrow is teal and the direction violet.
"""
from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pinocchio as pin
from builtin_interfaces.msg import Duration
from builtin_interfaces.msg import Time as TimeMsg
from geometry_msgs.msg import Point
from std_msgs.msg import ColorRGBA
from visualization_msgs.msg import Marker, MarkerArray

from ..core.health import ERROR, OK, STALE, WARN

NAMESPACE_FORCE = "force"
NAMESPACE_DIRECTION = "direction"
NAMESPACE_TEXT = "parameters"

DIRECTION_LENGTH_M = 0.15     # m, length of the direction arrow (a unit vector drawn)
SHAFT_DIAMETER_M = 0.012      # m, arrow shaft
HEAD_DIAMETER_M = 0.03        # m, arrow head
TEXT_HEIGHT_M = 0.035         # m, height of a capital letter of the text
TEXT_ABOVE_M = 0.12           # m, text placed this far above the contact point (world z)


def _rgba(hex_colour: str, alpha: float = 1.0) -> ColorRGBA:
    h = hex_colour.lstrip("#")
    r, g, b = (int(h[i:i + 2], 16) / 255.0 for i in (0, 2, 4))
    return ColorRGBA(r=r, g=g, b=b, a=alpha)


# our palette; level hues as in the replay report (offline/report.py LEVEL_COLOURS)
LEVEL_COLOURS = {OK: "#7cc16a", WARN: "#e8b931", ERROR: "#b5302a", STALE: "#5d6873"}
FORCE_COLOUR = "#0f6e7a"
DIRECTION_COLOUR = "#7b6aa8"


@dataclass
class MarkerScene:
    """What the markers show, for one status: frame and stamp; contact_point (3,) m and
    force (3,) N in that frame; direction (3,) unit; parameters and their std with names and
    units; state word and level (DiagnosticStatus level). ``extras``: figures a model's own
    layers need (e.g. a hinge axis), keyed by name."""

    frame_id: str
    stamp: TimeMsg
    contact_point: np.ndarray
    force: np.ndarray
    direction: np.ndarray
    parameters: Sequence[float]
    parameter_std: Sequence[float]
    names: Sequence[str]
    units: Sequence[str]
    state: str
    level: int
    extras: dict[str, Any] = field(default_factory=dict)


Layer = Callable[[MarkerScene, "MarkerBuilder"], list[Marker]]


def direction_layer(scene: MarkerScene, builder: MarkerBuilder) -> list[Marker]:
    """The manipulation direction u as an arrow of DIRECTION_LENGTH_M m from the contact
    point (``along_direction`` model)."""
    u = np.asarray(scene.direction, dtype=float)
    norm = float(np.linalg.norm(u))
    if not math.isfinite(norm) or norm < 1e-9:
        return []
    start = np.asarray(scene.contact_point, dtype=float)
    end = start + u / norm * DIRECTION_LENGTH_M
    return [builder.arrow(scene, NAMESPACE_DIRECTION, 0, start, end,
                          _rgba(DIRECTION_COLOUR, 0.9), SHAFT_DIAMETER_M * 0.6)]


# environment model -> its layers (``environment.model``; ``along_direction`` is the default)
ENVIRONMENT_LAYERS: dict[str, list[Layer]] = {"along_direction": [direction_layer]}


def register_environment_layer(model: str, layer: Layer) -> None:
    """Add a layer that draws what environment model ``model`` estimates (called once, where
    the model is defined)."""
    ENVIRONMENT_LAYERS.setdefault(model, []).append(layer)


def parameter_text(scene: MarkerScene) -> str:
    """The text marker's content: one line per parameter, value +/- std and unit, then the
    state."""
    lines = []
    for name, value, std, unit in zip(scene.names, scene.parameters, scene.parameter_std,
                                      scene.units):
        lines.append(f"{name.replace('_', ' ')}: {value:.4g} \u00b1 {std:.2g} {unit}")
    lines.append(f"state: {scene.state.replace('_', ' ')}")
    return "\n".join(lines)


class MarkerBuilder:
    """Builds the MarkerArray of a scene. ``force_scale``: m of arrow per N of force;
    ``lifetime_s``: s each marker stays without an update; ``model``: the environment model
    whose layers are drawn."""

    def __init__(self, force_scale: float, lifetime_s: float, model: str = "along_direction"):
        self.force_scale = float(force_scale)
        self.lifetime = Duration(sec=int(lifetime_s),
                                 nanosec=int(round((lifetime_s - int(lifetime_s)) * 1e9)))
        self.layers = list(ENVIRONMENT_LAYERS.get(model, []))

    def _marker(self, scene: MarkerScene, ns: str, id_: int, kind: int) -> Marker:
        m = Marker()
        m.header.frame_id = scene.frame_id
        m.header.stamp = scene.stamp
        m.ns, m.id, m.type, m.action = ns, id_, kind, Marker.ADD
        m.pose.orientation.w = 1.0
        m.lifetime = self.lifetime
        m.frame_locked = False
        return m

    def arrow(self, scene: MarkerScene, ns: str, id_: int, start: np.ndarray, end: np.ndarray,
              colour: ColorRGBA, shaft: float = SHAFT_DIAMETER_M) -> Marker:
        """An ARROW from ``start`` to ``end`` (m, scene frame)."""
        m = self._marker(scene, ns, id_, Marker.ARROW)
        m.points = [Point(x=float(start[0]), y=float(start[1]), z=float(start[2])),
                    Point(x=float(end[0]), y=float(end[1]), z=float(end[2]))]
        m.scale.x, m.scale.y, m.scale.z = shaft, max(HEAD_DIAMETER_M, 2 * shaft), 0.0
        m.color = colour
        return m

    def markers(self, scene: MarkerScene) -> MarkerArray:
        """Force arrow, the model's layers and the parameter text."""
        p = np.asarray(scene.contact_point, dtype=float)
        out = [self.arrow(scene, NAMESPACE_FORCE, 0, p,
                          p + np.asarray(scene.force, dtype=float) * self.force_scale,
                          _rgba(FORCE_COLOUR))]
        for layer in self.layers:
            out += layer(scene, self)
        text = self._marker(scene, NAMESPACE_TEXT, 0, Marker.TEXT_VIEW_FACING)
        text.pose.position = Point(x=float(p[0]), y=float(p[1]), z=float(p[2]) + TEXT_ABOVE_M)
        text.scale.z = TEXT_HEIGHT_M
        text.color = _rgba(LEVEL_COLOURS.get(scene.level, LEVEL_COLOURS[ERROR]))
        text.text = parameter_text(scene)
        out.append(text)
        return MarkerArray(markers=out)

    @staticmethod
    def clear(frame_id: str = "") -> MarkerArray:
        """One DELETEALL marker: RViz removes every marker of this topic."""
        m = Marker()
        m.header.frame_id = frame_id
        m.action = Marker.DELETEALL
        return MarkerArray(markers=[m])


class ContactPoint:
    """The contact frame's origin in the world frame (m) for a sample's joint positions, by
    Pinocchio's forward kinematics on a Data of its own (the Pipeline's is left alone)."""

    def __init__(self, model):
        self.model = model                      # core.model.RobotModel
        self._data = model.model.createData()

    def position(self, sample) -> np.ndarray:
        """(3,) m; raises what the model's joint mapping raises for a sample that does not
        fit (the node only asks for samples the Pipeline has processed)."""
        q, _, _ = self.model.joint_map(sample.names).apply(sample)
        pin.forwardKinematics(self.model.model, self._data, q)
        return pin.updateFramePlacement(self.model.model, self._data,
                                        self.model.frame_id).translation.copy()
