"""Commissioning from recorded data: torque bias, joint friction and noise levels, into a
parameter file.

``interaction-estimator tune BAG [BAG ...] --out FILE [--params BASE] [--urdf FILE] [--report DIR]
[--free-motion BAG ...] [--tool-frame LINK]`` (or ``python -m interaction_estimator.offline.tune
...``) runs the recorded joint states through the package's own :class:`~.pipeline.Pipeline`
and identifies, from the data:

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
   out. A bag in which the monitor finds no contact at all (a commissioning run of free motion,
   such as the simulator's ``commissioning`` scenario, which moves every joint both ways) serves
   bias, friction and sensor noise only, and the account of the segments says so; at least one bag
   must have contact, for step 4.
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
4. **Environment-filter noise** from contact. The filter's inputs (regressor rows and forces)
   are recorded from the last Pipeline pass and the package's own
   :class:`~.environment.EnvironmentFilter` is re-run on them with noise adaptation fixed (see
   :func:`fit_filter_noise`). Its innovations are strongly correlated at the sample rate (the
   force comes through the momentum observer, the acceleration through a smoothing
   differentiator), so a white-noise likelihood at full rate would let the parameters chase
   that correlated error. Process noise is therefore the maximum of the innovation likelihood
   ``-1/2 sum(log S + y^2/S)`` (Bar-Shalom, Li and Kirubarajan 2001, sec. 5.4) of the filter
   run on every m-th update, m the lag at which the innovations decorrelate, with 95 %
   likelihood-ratio intervals; measurement noise is matched at full rate so that the mean NIS
   is 1 (covariance matching, Mehra, IEEE TAC 1972), with an interval from the Newey-West
   standard error of that mean. The impact at each contact onset (:func:`onset_time`) counts in
   neither. Values the data cannot support are refused: a parameter never excited keeps the
   base process noise; one whose likelihood is flat towards zero keeps the base value when the
   data accept it, otherwise gets the largest value they accept. ``filter.noise_adaptation``
   is written as ``fixed``, since the measurement noise is now known.

The result is written as a ROS 2 parameter YAML (``interaction_estimator:`` /
``ros__parameters:``): the base file's own settings, the settings every bag recommends alike, and
the tuned ones, each tuned entry preceded by a comment saying what data it came from and how
sure it is (settings not listed keep their defaults; per-joint lists follow ``joint_names``,
written in the URDF's order). The file is written to a
temporary file beside the target and renamed: on any error nothing is written.

Layout of this package (each module one responsibility; DEVELOPERS.md has the map):
``recordings`` (bags in memory), ``passes`` (one Pipeline pass with its taps), ``segments``
(free motion and contact), ``friction`` (sensor noise, bias and friction; the model check),
``filter_noise`` (the environment filter's noise), ``model`` (the robot's dynamics, step 0),
``entries`` (the written settings and the parameter file), ``procedure`` (the whole tuning),
``command`` (the command line), ``report`` and ``report_model`` (the HTML report), ``common``
(constants, the error type).
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
                     TuneError,
)
from .entries import (
                     TunedEntry,
                     build_entries,
                     file_header,
                     free_only_text,
                     parameter_yaml,
                     write_text_atomic,
)
from .filter_noise import NoiseFit, fit_filter_noise, replay_filter
from .friction import Identification, JointFit, check_model_fit, identify
from .passes import FilterTape, Trace, run_pass
from .procedure import TuneResult, bag_settings, tune
from .recordings import Recording, Reference, read_bag, recording_from_run
from .segments import Segment, free_mask, margin, onset_time, steady_mask

__all__ = [
    "add_arguments", "explain", "main", "run", "CONTACT", "EXIT_FAILURE", "EXIT_OK",
    "EXIT_USAGE", "FREE", "FREE_ONLY_USE", "HELD_OUT_FRACTION", "LEARNING", "PHASES", "PROG",
    "REPORT_NAME", "TuneError", "TunedEntry", "build_entries", "file_header", "free_only_text",
    "parameter_yaml", "write_text_atomic", "NoiseFit", "fit_filter_noise", "replay_filter",
    "Identification", "JointFit", "check_model_fit", "identify", "FilterTape", "Trace",
    "run_pass", "TuneResult", "bag_settings", "tune", "Recording", "Reference", "read_bag",
    "recording_from_run", "Segment", "free_mask", "margin", "onset_time", "steady_mask",
]
