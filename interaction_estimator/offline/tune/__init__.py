"""Commissioning from recorded data: the robot's torque bias, joint friction and sensor noise,
into a parameter file.

``interaction-estimator tune BAG [BAG ...] --out FILE [--params BASE] [--urdf FILE] [--report DIR]
[--free-motion BAG ...] [--tool-frame LINK]`` (or ``python -m interaction_estimator.offline.tune
...``) runs the recorded joint states through the package's own :class:`~.pipeline.Pipeline`
and identifies, from the robot's free motion, properties of the ROBOT only:

0. **The robot's own dynamics** (when bags are named ``--free-motion`` or a tool is named):
   base inertial parameters, friction and bias from free motion, physically consistent,
   regularized toward the URDF, a tool on a named link included (:mod:`.model`,
   :mod:`interaction_estimator.offline.identification`). The identified model is written as a
   URDF beside the parameter file (same name, ``.urdf``), ``robot_description_file`` names it,
   and the steps below run with it.

1. **Segments.** Free motion and contact, as the Pipeline's contact monitor sees them
   (``Estimate.phase``). The monitor needs bias and friction to be right, so the segmentation is
   bootstrapped: the first pass takes only the start-up phase (``bias.startup`` s, which the
   Pipeline itself assumes is free motion), then passes with the identified values re-segment
   until the free-motion samples no longer change (at most :data:`MAX_SEGMENTATION_PASSES`).
   Samples within :func:`margin` s of contact, of an observer restart or of the start are left
   out. Bags named ``--free-motion`` are free motion whole, whatever the monitor says. Bags of
   free motion alone (a commissioning run, such as the simulator's ``commissioning`` scenario,
   which moves every joint both ways) and task bags (their free-motion stretches) serve alike;
   no contact is needed, and contact, where found, is only reported.
2. **Bias and friction** per joint from free motion. The observer residual computed without
   bias and friction is, in free motion, ``r_raw = O(-(b + f_v v + f_c tanh(v/eps)))`` where ``O``
   is the observer itself, a linear filter. The regressors are therefore made by running a copy of
   the Pipeline's own observer (same form, gain and noise settings, fed the recorded mass
   matrices) on the signals ``1``, ``v`` and ``tanh(v/eps)``; the fit is then exact whatever the
   observer's lag. Least squares (``scipy.optimize.lsq_linear``, friction >= 0) gives one bias per
   bag (sensor offsets drift between sessions) and one pair of friction coefficients per joint,
   with 95 % intervals from a Newey-West covariance (Newey and West, Econometrica 1987), since the
   residual is serially correlated. A joint that did not move both ways at more than
   :data:`MOVING_FACTOR` ``x eps`` keeps the base file's friction, with a warning.
3. **Sensor noise.** Effort and velocity noise standard deviations per joint, by the
   difference-based estimator on the second differences of free-motion samples (Rice, Ann.
   Statist. 1984; Gasser, Sroka and Jennen-Steinmetz, Biometrika 1986), with the median absolute
   deviation for robustness. They set ``observer.effort_noise`` and ``observer.velocity_noise``
   (medians over joints). The residual left by the fit is compared with what this noise explains
   when passed through the same observer (two unit-noise probes run alongside the regressors): a
   residual far above it means the URDF does not describe the recorded robot, or the "free" motion
   was not free, and the tuning stops.

Nothing about an object is identified or written: no ``filter.*`` entry (the object filter
learns its noise level online from its own residuals, :mod:`~.core.environment`), and a bag's
recommended settings of its task or object (``direction.*``, ``filter.*``, simulated bags carry
them) are used for that bag's passes only. A file tuned on one object's bag therefore carries
nothing of that object into other objects' estimates.

The result is written as a ROS 2 parameter YAML (``interaction_estimator:`` /
``ros__parameters:``): the base file's own settings, the robot settings every bag recommends
alike, and the tuned ones, each tuned entry preceded by a comment saying what data it came from
and how sure it is (settings not listed keep their defaults; per-joint lists follow
``joint_names``, written in the URDF's order). The file is written to a temporary file beside
the target and renamed: on any error nothing is written.

Layout of this package (each module one responsibility; DEVELOPERS.md has the map):
``recordings`` (bags in memory), ``passes`` (one Pipeline pass with its taps), ``segments``
(free motion and contact), ``friction`` (sensor noise, bias and friction; the model check),
``model`` (the robot's dynamics, step 0), ``entries`` (the written settings and the parameter
file), ``procedure`` (the whole tuning), ``command`` (the command line), ``report`` and
``report_model`` (the HTML report), ``common`` (constants, the error type).
"""
from __future__ import annotations

from .command import add_arguments, explain, main, run
from .common import (
    CONTACT,
    EXIT_FAILURE,
    EXIT_OK,
    EXIT_USAGE,
    FREE,
    FREE_ONLY_USE,
    HELD_OUT_FRACTION,
    LEARNING,
    PHASES,
    PROG,
    REPORT_NAME,
    ROBOT_ONLY,
    TASK_SETTINGS,
    TuneError,
)
from .entries import TunedEntry, build_entries
from .friction import Identification, JointFit, check_model_fit, identify
from .headers import file_header, free_only_text
from .passes import Trace, run_pass
from .procedure import TuneResult, bag_settings, tune
from .recordings import Recording, Reference, read_bag, recording_from_run
from .segments import Segment, contact_time, free_mask, margin

__all__ = [
    "add_arguments", "explain", "main", "run", "CONTACT", "EXIT_FAILURE", "EXIT_OK",
    "EXIT_USAGE", "FREE", "FREE_ONLY_USE", "HELD_OUT_FRACTION", "LEARNING", "PHASES", "PROG",
    "REPORT_NAME", "ROBOT_ONLY", "TASK_SETTINGS", "TuneError", "TunedEntry", "build_entries",
    "file_header", "free_only_text", "Identification",
    "JointFit", "check_model_fit", "identify", "Trace", "run_pass", "TuneResult",
    "bag_settings", "tune", "Recording", "Reference", "read_bag", "recording_from_run",
    "Segment", "contact_time", "free_mask", "margin",
]
