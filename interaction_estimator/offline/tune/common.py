"""Constants, the error type and small helpers shared by the tuning modules."""
from __future__ import annotations

import math

from ...core.health import PHASE_CONTACT, PHASE_FREE, PHASE_LEARNING, PHASES  # noqa: F401
from ...core.settings import SPEC_BY_NAME

PROG = "interaction-estimator tune"
EXIT_OK, EXIT_FAILURE, EXIT_USAGE = 0, 1, 2

LEARNING, FREE, CONTACT = PHASE_LEARNING, PHASE_FREE, PHASE_CONTACT
# what a bag without contact (a commissioning run) is, in every account of it
FREE_ONLY_USE = "free motion only, used for bias, friction and sensor noise"
# what tune writes, and what it leaves alone (the parameter file's header, the README)
ROBOT_ONLY = ("this file describes the robot only (bias, friction, sensor noise, and its "
              "dynamics when identified); tune writes no filter.* entry: the object filter "
              "learns its noise level online from its own residuals, and nothing about the "
              "objects in these bags is carried over to other objects")
MAX_SEGMENTATION_PASSES = 3     # Pipeline passes after the first, at most
MARGIN_EXTRA = 0.15             # s kept clear of contact and restarts, on top of 5 / gain
MIN_BAG_DURATION = 1.0          # s, shorter bags are refused
MIN_FREE_TIME = 0.5             # s of usable free motion, over all bags
MOVING_FACTOR = 5.0             # a joint "moves" above this many friction.smoothing_velocity
MIN_MOVING_TIME = 0.1           # s of motion needed in each direction to identify friction
MISMATCH_RATIO = 4.0            # free-motion residual / noise-explained level that stops tuning
MISMATCH_FLOOR = 0.1            # N·m (N): ... and by at least this much
HELD_OUT_FRACTION = 0.3         # of the contact time of a single bag, held out for the report
Z95 = 1.959963984540054         # two-sided 95 % normal quantile
# settings a bag may recommend that belong to its task or object, not to the robot: used for
# the bag's own passes, never written
TASK_SETTINGS = ("direction.", "filter.")
REPORT_NAME = "tuning_report.html"


class TuneError(ValueError):
    """The data cannot be used for tuning as asked; the message says what is missing."""



def _clamp(name: str, value: float) -> float:
    spec = SPEC_BY_NAME[name]
    lo = spec.minimum if spec.minimum is not None else -math.inf
    hi = spec.maximum if spec.maximum is not None else math.inf
    return float(min(max(value, lo), hi))


