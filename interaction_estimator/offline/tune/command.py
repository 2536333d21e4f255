"""The ``tune`` command: arguments, inputs, the account printed, exit codes."""
from __future__ import annotations

import argparse
import math
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

import numpy as np

from ...core.model import ModelError
from ...core.settings import SettingsError
from ...io.description_file import resolve as resolve_description
from ...io.files import write_atomic
from ..identification import Tool
from ..identification.signals import DEFAULT_WINDOW
from .common import EXIT_OK, EXIT_USAGE, FREE_ONLY_USE, PROG, REPORT_NAME, TuneError
from .headers import file_header, model_summary, point_at_model, urdf_header
from .model import ModelRequest
from .procedure import TuneResult, tune
from .recordings import Recording, read_bag

# ============================================================================================
# explanation


def explain(result: TuneResult) -> str:
    """A plain-text account of what was found (printed by the command)."""
    r, ident = result, result.identification
    out = [f"bags: {len(r.bags)}; pipeline passes: {r.passes}"]
    out.append("segments used (bag, kind, s):")
    for s in sorted(r.segments, key=lambda s: (s.bag, s.start)):
        out.append(f"  bag {s.bag + 1}  {s.kind:<7} {s.start:9.3f} .. {s.end:9.3f}"
                   f"  ({s.duration:.2f} s)")
    for b in r.free_only:
        out.append(f"  bag {b + 1}  no contact: {FREE_ONLY_USE}")
    out.append(f"free motion used: {ident.free_time:.2f} s; contact found: "
               f"{r.contact_time:.2f} s (not used: tune identifies the robot only)")
    out.append(f"{'joint':<24}{'bias':>10}{'+/-':>8}{'viscous':>10}{'+/-':>8}{'coulomb':>10}"
               f"{'+/-':>8}{'resid':>8}{'noise':>8}{'effort':>8}{'veloc':>9}")
    for j in ident.joints:
        def ci(x: float) -> str:
            return f"{x:8.3g}" if math.isfinite(x) else f"{'kept':>8}"
        out.append(f"{j.name:<24}{j.bias[-1]:10.4g}{j.bias_ci[-1]:8.2g}{j.viscous:10.4g}"
                   f"{ci(j.viscous_ci)}{j.coulomb:10.4g}{ci(j.coulomb_ci)}"
                   f"{j.residual_std:8.3g}{j.explained_std:8.3g}{j.effort_noise:8.3g}"
                   f"{j.velocity_noise:9.3g}")
    out.append("  (bias of the last bag; 'resid': free-motion residual left by the fit, 'noise':"
               " what the sensor noise explains, both RMS)")
    out.append(f"sensor noise: effort {ident.effort_noise:.4g} N·m, velocity "
               f"{ident.velocity_noise:.4g} rad/s (medians over joints)")
    out.append("object filter: nothing written (it learns its noise level online from its "
               "own residuals)")
    out += explain_model(r)
    for w in r.warnings:
        out.append(f"warning: {w}")
    return "\n".join(out)


def explain_model(r: TuneResult) -> list[str]:
    """The identified model, link by link, and the held-out free-motion residual per joint."""
    if r.model is None:
        return []
    ident = r.model.identification
    out = ["robot model identified from free motion:"]
    out += [f"  {line}" for line in model_summary(r)]
    out.append(f"  {'link':<24}{'status':<11}{'determined':>10}{'mass URDF':>11}"
               f"{'identified':>12}{'+/-':>9}{'CoM moved':>11}{'+/-':>9}")
    for link in ident.links:
        moved = (float(np.linalg.norm(link.value[1:4] - link.urdf[1:4]))
                 if link.kind == "link" else float(np.linalg.norm(link.value[1:4])))
        ci = float(np.linalg.norm(link.half_width[1:4]))
        def num(x: float, w: int) -> str:
            return f"{x:{w}.4g}" if math.isfinite(x) else f"{'-':>{w}}"
        out.append(f"  {link.name:<24}{link.status:<11}{link.determined:10.2f}"
                   f"{num(link.urdf[0], 11)}{num(link.value[0], 12)}{num(link.half_width[0], 9)}"
                   f"{num(moved, 11)}{num(ci, 9)}")
    out.append("  (mass kg; 'CoM moved': distance in m from the URDF's centre of mass (a tool: "
               "from its link's origin); +/-: 95 %; 'determined': of 10 parameters' worth)")
    out.append(f"  {'joint':<24}{'residual URDF':>15}{'identified':>12}"
               "   (held-out, RMS, N.m or N)")
    for j, name in enumerate(ident.joints):
        out.append(f"  {name:<24}{ident.residual_before[j]:15.4g}{ident.residual_after[j]:12.4g}")
    out += [f"  note: {n}" for n in ident.notes]
    return out


# ============================================================================================
# command line


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """The ``tune`` subcommand's arguments."""
    parser.add_argument("bags", nargs="*", metavar="BAG", type=Path,
                        help="rosbag2 bags (directory, .mcap or .db3) of the robot: free motion "
                             "alone, or tasks that start with free motion (only their "
                             "free-motion stretches are used)")
    parser.add_argument("--out", required=True, type=Path, metavar="FILE",
                        help="parameter YAML to write (the base with the tuned values)")
    parser.add_argument("--params", type=Path, metavar="BASE",
                        help="base parameter YAML (default: the defaults and the bags' "
                             "recommended settings)")
    parser.add_argument("--urdf", type=Path, metavar="FILE",
                        help="URDF of the robot (default: robot_description_file, else the "
                             "bag's robot_description)")
    parser.add_argument("--report", type=Path, metavar="DIR",
                        help=f"also write DIR/{REPORT_NAME}: what was identified, and base "
                             "against tuned settings on held-out contact data when a bag has "
                             "contact")
    parser.add_argument("--topics", nargs="+", default=[], metavar="ROLE=TOPIC",
                        help="topic of a role: joint_states, joint_efforts, robot_description "
                             "(e.g. joint_states=/marten/joint_states)")
    model = parser.add_argument_group(
        "the robot's own dynamics", "identified from free motion and written as a URDF beside "
        "--out (same name, .urdf), which the parameter file's robot_description_file then names")
    model.add_argument("--free-motion", nargs="+", default=[], metavar="BAG", type=Path,
                       help="bags in which the robot touched nothing from start to end (the "
                            "commissioning motion of `interaction-estimator excitation`): used "
                            "whole to identify the robot's dynamics, and for bias, friction and "
                            "noise like the others")
    model.add_argument("--tool-frame", metavar="LINK",
                       help="a URDF link on which a tool or payload the URDF lacks is mounted: "
                            "its mass, centre of mass and inertia are identified")
    model.add_argument("--tool-mass", type=_nonnegative, default=0.0, metavar="KG",
                       help="your guess of the tool's mass in kg (default: none)")
    model.add_argument("--tool-name", default="tool", metavar="NAME",
                       help="name of the tool's link in the written URDF (default 'tool')")
    model.add_argument("--inertia-spread", type=_spread, default=0.5, metavar="FRACTION",
                       help="how far the URDF's inertial values may be off, as a fraction of "
                            "each link's own mass and size (one standard deviation of the prior;"
                            " default 0.5); what the motion cannot tell stays as in the URDF")
    model.add_argument("--smoothing", type=_window, default=DEFAULT_WINDOW, metavar="S",
                       help="window in s of the smoothing differentiator that gives joint "
                            f"accelerations (Savitzky-Golay, cubic; default {DEFAULT_WINDOW:g})")


def _number(text: str) -> float:
    try:
        x = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"{text!r} is not a number") from None
    if not math.isfinite(x):
        raise argparse.ArgumentTypeError(f"{text!r} is not a finite number")
    return x


def _nonnegative(text: str) -> float:
    x = _number(text)
    if x < 0:
        raise argparse.ArgumentTypeError(f"{x:g} kg is negative; expected a mass >= 0 kg")
    return x


def _spread(text: str) -> float:
    x = _number(text)
    if not 0 < x <= 10:
        raise argparse.ArgumentTypeError(f"{x:g} is outside (0, 10]; expected a fraction such "
                                         "as 0.5")
    return x


def _window(text: str) -> float:
    x = _number(text)
    if not 0 < x <= 2:
        raise argparse.ArgumentTypeError(f"{x:g} s is outside (0, 2] s; expected a window such "
                                         "as 0.05 s")
    return x


def _check_out(out: Path, report: Path | None) -> None:
    if out.exists() and out.is_dir():
        raise TuneError(f"--out {str(out)!r} is a directory; expected a file path for the "
                        "parameter YAML")
    if not out.parent.is_dir():
        raise TuneError(f"cannot write {str(out)!r}: directory {str(out.parent)!r} does not "
                        "exist")
    if report is not None:
        if report.exists() and not report.is_dir():
            raise TuneError(f"--report {str(report)!r} is a file; expected a directory")
        if not report.exists() and not report.parent.is_dir():
            raise TuneError(f"cannot write the report into {str(report)!r}: directory "
                            f"{str(report.parent)!r} does not exist")


def _load_inputs(args: argparse.Namespace) -> tuple[list[Recording], str, dict[str, Any], str]:
    from ...io.parameter_file import load_parameter_file, parameters_from_yaml
    if not args.bags and not args.free_motion:
        raise TuneError("no bags given; expected BAG ... (and --free-motion BAG ...)")
    recs = [read_bag(Path(b), args.topics) for b in list(args.bags) + list(args.free_motion)]
    params: dict[str, Any] = {}
    base_source = "defaults and the bags' recommended settings"
    if args.params is not None:
        load_parameter_file(args.params)  # validates: unknown names, ranges
        params = parameters_from_yaml(Path(args.params).read_text(encoding="utf-8"),
                                      str(args.params))
        base_source = f"{args.params}"
    urdf = _load_urdf(args.urdf, params, recs, args.params)
    return recs, urdf, params, base_source


def _load_urdf(urdf: Path | None, params: Mapping[str, Any], recs: Sequence[Recording],
               params_file: Path | None = None) -> str:
    """--urdf, else robot_description_file (relative to its parameter file), else the bags'
    own description."""
    if urdf is not None:
        try:
            return Path(urdf).read_text(encoding="utf-8")
        except OSError as exc:
            raise TuneError(f"URDF file {str(urdf)!r} cannot be read: {exc.strerror}") from None
    path = params.get("robot_description_file") or ""
    if path:
        path = str(resolve_description(path, [params_file] if params_file else []))
        try:
            return Path(path).read_text(encoding="utf-8")
        except OSError as exc:
            raise TuneError(f"robot_description_file {path!r} cannot be read: "
                            f"{exc.strerror}") from None
    texts = {r.urdf for r in recs if r.urdf}
    if not texts:
        raise TuneError("no URDF: the bags have no robot_description and none was given; "
                        "expected --urdf FILE (or robot_description_file in --params)")
    if len(texts) > 1:
        raise TuneError("the bags carry different robot descriptions (different robots?); "
                        "expected bags of one robot, or --urdf FILE to choose its URDF")
    return texts.pop()


def run(args: argparse.Namespace) -> int:
    """Run the tuning for parsed arguments; returns the exit code (0 ok, 2 bad input)."""
    from ...io.bag import BagError
    try:
        _check_out(Path(args.out), args.report)
        recs, urdf, params, base_source = _load_inputs(args)
        request = _model_request(args, len(recs))
        result = tune(recs, urdf, params, log=lambda m: print(m, file=sys.stderr),
                      model=request)
        urdf_out = None
        if result.model is not None:
            urdf_out = Path(args.out).with_suffix(".urdf")
            point_at_model(result, urdf_out.name, base_source)
        text = result.parameter_file(file_header(result, base_source))
        report_html = None
        if args.report is not None:
            from .report import build_tuning_report
            report_html = build_tuning_report(result, recs, urdf, params)
        if result.model is not None and urdf_out is not None:
            write_atomic(urdf_out, result.model.identification.urdf(
                urdf, urdf_header(result, base_source)))
        write_atomic(Path(args.out), text)
        if report_html is not None:
            Path(args.report).mkdir(exist_ok=True)
            write_atomic(Path(args.report) / REPORT_NAME, report_html)
    except (TuneError, BagError, SettingsError, ModelError) as exc:
        print(f"{PROG}: error: {exc}", file=sys.stderr)
        print("no file written", file=sys.stderr)
        return EXIT_USAGE
    print(explain(result))
    written = [str(args.out)] + ([str(urdf_out)] if urdf_out is not None else []) \
        + ([str(Path(args.report) / REPORT_NAME)] if args.report is not None else [])
    print("wrote " + ", ".join(written))
    return EXIT_OK


def _model_request(args: argparse.Namespace, n_recs: int) -> ModelRequest | None:
    """What of the robot's dynamics to identify (None: nothing asked)."""
    first_free = n_recs - len(args.free_motion)
    tools = ()
    if args.tool_frame:
        tools = (Tool(args.tool_name, args.tool_frame, args.tool_mass),)
    elif args.tool_mass:
        raise TuneError("--tool-mass without --tool-frame; expected --tool-frame LINK, the link "
                        "the tool is mounted on")
    request = ModelRequest(tuple(range(first_free, n_recs)), tools, args.inertia_spread,
                           args.smoothing)
    return request if request.wanted else None


def main(argv: Sequence[str] | None = None) -> int:
    parser = argparse.ArgumentParser(prog=PROG, description=(
        "Identify the robot's torque bias, joint friction and sensor noise (and, when asked, "
        "its dynamics) from recorded bags and write them into a parameter file; nothing about "
        "the objects in the bags is written."))
    add_arguments(parser)
    return run(parser.parse_args(argv))
