"""Constants, the error type and small helpers shared by the tuning modules."""
from __future__ import annotations

import math

from ...core.health import PHASE_CONTACT, PHASE_FREE, PHASE_LEARNING, PHASES  # noqa: F401
from ...core.settings import SPEC_BY_NAME

PROG = "interaction-estimator tune"
EXIT_OK, EXIT_FAILURE, EXIT_USAGE = 0, 1, 2

LEARNING, FREE, CONTACT = PHASE_LEARNING, PHASE_FREE, PHASE_CONTACT
# what a bag without contact (a commissioning run) is used for, in every account of it
FREE_ONLY_USE = ("free motion only, used for bias, friction and sensor noise, not for the "
                 "environment filter")
MAX_SEGMENTATION_PASSES = 3     # Pipeline passes after the first, at most
MARGIN_EXTRA = 0.15             # s kept clear of contact and restarts, on top of 5 / gain
MIN_BAG_DURATION = 1.0          # s, shorter bags are refused
MIN_FREE_TIME = 0.5             # s of usable free motion, over all bags
MIN_CONTACT_TIME = 0.5          # s of environment-filter updates, over all bags
MOVING_FACTOR = 5.0             # a joint "moves" above this many friction.smoothing_velocity
MIN_MOVING_TIME = 0.1           # s of motion needed in each direction to identify friction
MIN_EXCITED_FRACTION = 0.05     # of the contact updates, for a parameter's process noise
MISMATCH_RATIO = 4.0            # free-motion residual / noise-explained level that stops tuning
MISMATCH_FLOOR = 0.1            # N·m (N): ... and by at least this much
HELD_OUT_FRACTION = 0.3         # of the contact time of a single bag, held out for the report
Z95 = 1.959963984540054         # two-sided 95 % normal quantile
CHI2_1_95 = 3.841458820694124   # chi-square(1) 95 % quantile (likelihood-ratio test)
SEARCH_DECADES = 4.0            # noise parameters searched within base x 10^(+-4)
WHITE_CORRELATION = 0.2         # innovations this little correlated count as white
MAX_DECIMATION = 200            # updates, at most, between two kept by the decimated fit
MIN_DECIMATED_UPDATES = 60      # updates the decimated fit keeps, at least
DECIMATION_OFFSETS = 3          # decimated series (different offsets) averaged
SEARCH_SWEEPS = 2               # coordinate sweeps of the likelihood search
MATCH_TOLERANCE = 0.01          # |log(mean NIS)| at which the measurement noise is matched
REPORT_NAME = "tuning_report.html"


class TuneError(ValueError):
    """The data cannot be used for tuning as asked; the message says what is missing."""



def _clamp(name: str, value: float) -> float:
    spec = SPEC_BY_NAME[name]
    lo = spec.minimum if spec.minimum is not None else -math.inf
    hi = spec.maximum if spec.maximum is not None else math.inf
    return float(min(max(value, lo), hi))


